"""The noise floor fitted for many hops at once equals the floor fitted hop by hop.

References: the Whittaker smoother is checked against ``scipy.linalg.solveh_banded`` (the
banded Cholesky solve of Eilers 2003, "A perfect smoother"), the running maximum against
``scipy.ndimage.maximum_filter1d``; the batched occupancy mask against the one-hop mask.
The sweeps are simulated (tests/test_sweep_floor.py's steep preamp and crowded band).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
import scipy.ndimage

from survey import dsp
from survey.bandplan import band_plan
from survey.floor_rows import dilate_rows, occupied_rows, whittaker_rows
from survey.noise_floor import _penalty_bands, _stiffness, local_noise_floor, local_noise_floors
from survey.records import SweepSettings
from survey.sources.simulated import SimulatedSource
from survey.sweep import plan_for_source
from test_sweep_floor import _scene

#: The batch solves each hop's system with the same arithmetic as a solve on its own, so the
#: floors agree to rounding; 1e-9 dB is far below the 0.01 dB any reading is shown with.
TOLERANCE_DB = 1e-9


def _spectra(dwell_s: float, occupancy: float, seed: int):
    settings = SweepSettings(band="europe", dwell_s=dwell_s)
    src = SimulatedSource(_scene(occupancy, seed), "steep", seed=seed)
    plan = plan_for_source(band_plan("europe"), src, settings)
    out = []
    for hop in plan.hops:
        src.tune(hop.center_hz)
        out.append(dsp.hop_spectrum(src.read(max(settings.fft_size, int(round(dwell_s * src.sample_rate_hz)))),
                                    settings))
    return out


@pytest.fixture(scope="module", params=[(0.1, 0.8, 2), (0.005, 0.5, 3)], ids=["K117-crowded", "K5-half"])
def sweep(request):
    return _spectra(*request.param)


def _db(x):
    return 10.0 * np.log10(x)


def test_batched_floors_equal_the_hop_by_hop_floors(sweep):
    groups_batch, groups_one = [], []
    batched = local_noise_floors([s.offsets_hz for s in sweep], [s.psd for s in sweep], [s.usable for s in sweep],
                                 effective_averages=[s.effective_averages for s in sweep], groups_out=groups_batch)
    assert len(batched) == len(sweep) == len(groups_batch) >= 9
    for s, floor, g in zip(sweep, batched, groups_batch):
        alone = local_noise_floor(s.offsets_hz, s.psd, s.usable, effective_averages=s.effective_averages,
                                  groups_out=groups_one)
        assert np.array_equal(np.isnan(floor), np.isnan(alone))
        ok = ~np.isnan(alone)
        assert np.max(np.abs(_db(floor[ok]) - _db(alone[ok]))) <= TOLERANCE_DB
        assert np.max(np.abs(g.fit_db - groups_one[-1].fit_db)) <= TOLERANCE_DB
        assert np.array_equal(g.y, groups_one[-1].y)


def test_hops_of_different_geometry_or_averages_are_fitted_apart_and_returned_in_order(sweep):
    short = _spectra(0.005, 0.5, 3)[:3]  # other K_eff
    mixed = [sweep[0], short[0], sweep[1], short[1]]
    batched = local_noise_floors([s.offsets_hz for s in mixed], [s.psd for s in mixed], [s.usable for s in mixed],
                                 effective_averages=[s.effective_averages for s in mixed])
    for s, floor in zip(mixed, batched):
        alone = local_noise_floor(s.offsets_hz, s.psd, s.usable, effective_averages=s.effective_averages)
        ok = ~np.isnan(alone)
        assert np.max(np.abs(_db(floor[ok]) - _db(alone[ok]))) <= TOLERANCE_DB


def test_stacked_whittaker_solves_equal_scipy_solveh_banded_per_row():
    rng = np.random.default_rng(7)
    n = 60
    penalty = _penalty_bands(np.full(n - 2, _stiffness(150e3, 8e3)), np.full(n - 1, 3.0))
    y = rng.normal(size=(5, n)).cumsum(axis=1)
    weight = (rng.random((5, n)) > 0.3).astype(float)
    weight[2, :] = 0.0  # a row with no weight at all: the ridge keeps it definite
    z = whittaker_rows(y, weight, penalty)
    for r in range(5):
        ab = penalty.copy()
        ab[2] += weight[r] + 1e-9
        expect = scipy.linalg.solveh_banded(ab, weight[r] * y[r], lower=False)
        assert np.allclose(z[r], expect, rtol=1e-10, atol=1e-12)


def test_row_dilation_matches_scipy_ndimage_and_does_not_reach_across_rows():
    rng = np.random.default_rng(3)
    for n in (1, 4, 11, 60):
        for half in (1, 2, 5, 12):
            for rows in (1, 4):
                mask = rng.random((rows, n)) > 0.85
                grown = scipy.ndimage.binary_dilation(mask, structure=np.ones((1, 2 * half + 1), dtype=bool))
                assert np.array_equal(dilate_rows(mask, half), grown)
    long = np.zeros((2, 40), dtype=bool)
    long[0, -1] = True
    assert not dilate_rows(long, 12)[1].any() and dilate_rows(long, 12)[0, -13:].all()


def _occupied_reference(resid, sigma, usable, core_sigma, skirt_sigma, reach, skirt_max, carrier_db, peak_half,
                        occupancy, per_db, body_half):
    """The one-hop occupancy rule of survey.noise_floor._occupied written plainly, element by
    element where that is clearer, with scipy.ndimage for the running maximum and dilations."""
    n = resid.size
    core = (resid > core_sigma * sigma) & usable
    r = resid * usable
    smooth = np.convolve(r, np.full(3, 1.0 / 3.0), mode="same")
    rising = (smooth > skirt_sigma * sigma / np.sqrt(3.0)) | core
    claimed = np.zeros(n, dtype=bool)
    i = 0
    while i < n:  # each run of rising groups holding a core is claimed
        if rising[i]:
            j = i
            while j < n and rising[j]:
                j += 1
            if core[i:j].any():
                claimed[i:j] = True
            i = j
        else:
            i += 1
    near_core = scipy.ndimage.binary_dilation(core, structure=np.ones(2 * skirt_max + 1, dtype=bool))
    claimed &= near_core
    carrier = (r >= scipy.ndimage.maximum_filter1d(r, 2 * peak_half + 1, mode="nearest")) & (smooth > carrier_db) & core
    held = np.zeros(n, dtype=bool)
    body = np.zeros(n, dtype=bool)
    for at in np.flatnonzero(carrier):
        half = occupancy + int(np.rint(per_db * max(smooth[at] - 10.0, 0.0)))
        held[max(at - half, 0) : at + half + 1] = True
        grown = body_half + half - occupancy
        body[max(at - grown, 0) : at + grown + 1] = True
    claimed = (claimed & held) | body
    if reach > 0:
        claimed = scipy.ndimage.binary_dilation(claimed, structure=np.ones(2 * reach + 1, dtype=bool))
    return claimed


def test_occupancy_of_stacked_rows_equals_each_row_alone(sweep):
    groups = []
    local_noise_floors([s.offsets_hz for s in sweep], [s.psd for s in sweep], [s.usable for s in sweep],
                       effective_averages=[s.effective_averages for s in sweep], groups_out=groups)
    resid = np.stack([g.y - (g.fit_db + g.bias_db) for g in groups])
    g0 = groups[0]
    stacked = occupied_rows(resid, g0.sigma_db, g0.has_data, 4.0, 1.0, *g0.occupancy_args)
    assert stacked.any() and not stacked.all()
    for r in range(resid.shape[0]):
        alone = occupied_rows(resid[r : r + 1], g0.sigma_db, g0.has_data, 4.0, 1.0, *g0.occupancy_args)[0]
        assert np.array_equal(stacked[r], alone)
        reference = _occupied_reference(resid[r], g0.sigma_db, g0.has_data, 4.0, 1.0, *g0.occupancy_args)
        assert np.array_equal(alone, reference)


def test_occupancy_matches_the_plain_rule_on_random_residuals_with_many_carriers():
    rng = np.random.default_rng(11)
    n = 230
    usable = np.ones(n, dtype=bool)
    usable[110:116] = False  # a DC guard
    rows = []
    for _ in range(6):
        resid = rng.normal(0.0, 0.3, n)
        for at in rng.integers(0, n, 12):  # more than a few carriers per row: the vectorised painting
            resid[max(at - 8, 0) : at + 9] += rng.uniform(2.0, 40.0) * np.hanning(17)[: min(at + 9, n) - max(at - 8, 0)]
        rows.append(resid)
    stacked = np.stack(rows)
    args = (0.3, usable, 4.0, 1.0, 1, 3, 1.4, 5, 18, 0.25, 11)
    got = occupied_rows(stacked, *args)
    assert got.any() and not got.all()
    for r in range(stacked.shape[0]):
        assert np.array_equal(got[r], _occupied_reference(stacked[r], *args))
        assert np.array_equal(occupied_rows(stacked[r : r + 1], *args)[0], got[r])
