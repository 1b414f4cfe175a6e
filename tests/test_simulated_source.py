"""The simulated receiver against its own truth, thermal-noise physics and the sweep engine."""

from __future__ import annotations

import json
import re
from dataclasses import replace

import numpy as np
import pytest

from survey import dsp, fm
from survey.bandplan import band_plan
from survey.errors import SceneError
from survey.records import SweepSettings
from survey.scene import parse_scene
from survey.sources.base import IQSource
from survey.sources.simulated import LSB_FS, SimulatedSource, _FadingTrack, quantisation_density_fs2_hz
from survey.sources.simulated_truth import quantiser_gain_and_distortion
from survey.sweep import plan_for_source, run_sweep
from survey.units import BOLTZMANN_J_PER_K, nf_db_to_k

FS = 2.4e6


def _scene(**over):
    d = {
        "scene": {"name": "unit"},
        "outside_noise": {"environment": "rural"},
        "receiver": {"nf_db": 9.0, "full_scale_dbm": -60.0},
        "preamp": {"peaked": {"gain_db": 20.0, "nf_db": 1.0,
                              "circuits": [{"f0_hz": 94.5e6, "q": 36.0}] * 3}},
        "station": [],
    }
    d.update(over)
    return parse_scene(d)


def _psd(block, fft_size=2048):
    return dsp.averaged_psd(dsp.to_complex64(block.raw, block.datatype), block.sample_rate_hz, fft_size)


# ---- protocol, clock, determinism -------------------------------------------------------------

def test_is_an_iq_source_and_describes_itself():
    src = SimulatedSource(_scene(), "bare", seed=7)
    assert isinstance(src, IQSource)
    assert src.kind == "simulated" and src.fixed_centers_hz is None and src.sample_rate_hz == FS
    d = src.describe()
    assert d["label"] == "SIMULATED" and d["seed"] == 7 and d["scene"] == "unit"
    json.dumps(d)


def test_clock_advances_by_settle_reads_and_advance():
    src = SimulatedSource(_scene(), "bare", settle_s=0.02, epoch_utc="2026-06-01T20:00:00Z")
    src.tune(95e6)
    assert src.time_s == pytest.approx(0.02)
    b = src.read(24_000)
    assert b.started_utc == "2026-06-01T20:00:00.020000Z"
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{6}Z", b.started_utc)
    assert src.time_s == pytest.approx(0.03)
    src.advance(60.0)
    src.tune(96e6)
    assert src.read(2400).started_utc == "2026-06-01T20:01:00.050000Z"
    assert b.datatype == "cu8" and b.raw.dtype == np.uint8 and b.n_samples == 24_000


def test_same_seed_same_bytes_other_seed_other_bytes():
    sc = _scene(station=[{"name": "A", "freq_mhz": 95.2, "level_dbm": -80.0,
                          "fading": {"time_constant_s": 10.0, "spread_db": 3.0}}])
    blocks = []
    for seed in (3, 3, 4):
        s = SimulatedSource(sc, "bare", seed=seed)
        s.tune(95e6)
        blocks.append(s.read(24_000).raw)
    assert np.array_equal(blocks[0], blocks[1])
    assert not np.array_equal(blocks[0], blocks[2])


def test_hop_does_not_depend_on_what_was_read_before():
    sc = _scene(station=[{"name": "A", "freq_mhz": 95.2, "level_dbm": -80.0,
                          "fading": {"time_constant_s": 5.0, "spread_db": 3.0}}])
    a = SimulatedSource(sc, "bare", seed=1)
    a.tune(90e6)
    a.read(24_000)
    a.advance(30.0)
    a.tune(95e6)
    t = a.time_s
    first = a.read(24_000).raw
    b = SimulatedSource(sc, "bare", seed=1)
    b.advance(t)
    b.tune(95e6)
    assert np.array_equal(first, b.read(24_000).raw)


def test_errors_say_what_to_do():
    src = SimulatedSource(_scene(), "bare")
    with pytest.raises(SceneError, match="tune"):
        src.read(10)
    with pytest.raises(SceneError, match="bare, peaked"):
        src.set_chain("nothing")
    with pytest.raises(SceneError, match="antenna"):
        src.set_chain("bare", "generator")
    src.close()
    with pytest.raises(SceneError, match="closed"):
        src.tune(95e6)


def test_fading_is_ornstein_uhlenbeck():
    # Stationary OU: standard deviation = spread, autocorrelation exp(-lag/tau) (e^-1 at tau).
    tr = _FadingTrack(seed=5, index=0, tau_s=10.0, spread_db=3.0)
    t = np.arange(0.0, 20_000.0, 0.5)
    x = np.array([tr.level_db(v) for v in t])
    assert x.std() == pytest.approx(3.0, rel=0.1)
    lag = 20  # 10 s at 0.5 s steps
    rho = np.corrcoef(x[:-lag], x[lag:])[0, 1]
    assert rho == pytest.approx(np.exp(-1.0), abs=0.06)
    again = _FadingTrack(seed=5, index=0, tau_s=10.0, spread_db=3.0)
    assert again.level_db(12_345.6) == pytest.approx(tr.level_db(12_345.6))


# ---- thermal noise from first principles ---------------------------------------------------------

@pytest.mark.parametrize("nf_db", [0.0, 6.0])
def test_terminated_noise_density_is_k_t_through_the_chain(nf_db):
    # A 50 ohm load at T0 = 290 K delivers k T0 = -173.975 dBm/Hz (REFERENCES.md [D]; k exact,
    # SI Brochure 2019); the receiver adds Tr = T0 (F - 1) (IEEE Std 161). With full scale
    # -85 dBm, expected density in dBFS/Hz = 10 log10(k (T0 + Tr) 1e3) + 85, plus quantisation.
    full_scale_dbm = -85.0
    sc = _scene(receiver={"nf_db": nf_db, "full_scale_dbm": full_scale_dbm, "dc_offset": [0.0, 0.0],
                          "amplitude_imbalance_db": 0.0, "phase_imbalance_deg": 0.0})
    src = SimulatedSource(sc, "bare", "terminated", seed=2)
    src.tune(98e6)
    off, psd = _psd(src.read(240_000))
    tr_k = nf_db_to_k(nf_db)
    thermal = BOLTZMANN_J_PER_K * (290.0 + tr_k) * 1e3 / 10 ** (full_scale_dbm / 10)
    expected = thermal + quantisation_density_fs2_hz(FS)
    if nf_db == 0.0:
        assert 10 * np.log10(BOLTZMANN_J_PER_K * 290.0 * 1e3) == pytest.approx(-173.975, abs=0.001)
    flat = (np.abs(off) > 20e3) & (np.abs(off) < 0.75 * FS / 2)
    measured = psd[flat].mean()  # ~1500 bins x 117 averages: about 0.01 dB scatter
    assert 10 * np.log10(measured / expected) == pytest.approx(0.0, abs=0.03)


def test_rolloff_shapes_the_floor_like_the_truth():
    sc = _scene(receiver={"nf_db": 6.0, "full_scale_dbm": -85.0})
    src = SimulatedSource(sc, "bare", "terminated", seed=2)
    src.tune(98e6)
    off, psd = _psd(src.read(240_000))
    mu, nu = sc.receiver.iq_mu_nu  # y = mu x + nu conj(x) folds the mirrored band in
    expected = (abs(mu) ** 2 * src.noise_density_fs2_hz(98e6, off) + abs(nu) ** 2 * src.noise_density_fs2_hz(98e6, -off)
                + quantisation_density_fs2_hz(FS))
    for lo, hi in [(0.3e6, 0.9e6), (0.97e6, 1.05e6), (1.10e6, 1.15e6)]:
        m = (np.abs(off) >= lo) & (np.abs(off) < hi)
        assert 10 * np.log10(psd[m].mean() / expected[m].mean()) == pytest.approx(0.0, abs=0.1), (lo, hi)
    edge = (np.abs(off) > 1.15e6)
    assert 10 * np.log10(psd[edge].mean() / psd[np.abs(off) < 0.5e6].mean()) < -15.0


def test_y_factor_on_rendered_iq_gives_friis_temperature():
    # Y-factor method (IEEE Std 161 definitions): Te = (Th - Y Tc)/(Y - 1) measured through the
    # preamp and receiver must equal the Friis cascade Te = Tp + Tr/G (Friis 1944) at each
    # frequency, here at the peak and on the skirt of the peaked preamp.
    sc = _scene(receiver={"nf_db": 9.0, "full_scale_dbm": -55.0, "dc_offset": [0.0, 0.0]},
                noise_source={"enr_db": 15.0})
    center = 94.5e6
    powers = {}
    freqs = np.array([94.2e6, 94.8e6, 95.2e6])
    for inp in ("noise-hot", "noise-cold"):
        src = SimulatedSource(sc, "peaked", inp, seed=11)
        src.tune(center)
        off, psd = _psd(src.read(480_000))
        p = dsp.channel_power(off, psd, freqs - src.lo_hz(center), 200e3)
        powers[inp] = p - quantisation_density_fs2_hz(FS) * 200e3  # a known receiver property
    y = powers["noise-hot"] / powers["noise-cold"]
    th = 290.0 * (1 + 10**1.5)
    te = (th - y * 290.0) / (y - 1)
    ct = src.chain_truth(freqs)
    # the truth integrates G over the 200 kHz band; compare with the band-mean Friis value
    friis = []
    for f in freqs:
        band = np.linspace(f - 100e3, f + 100e3, 201)
        c = src.chain_truth(band)
        g = 10 ** (c.gain_db / 10)
        # Te of the band: (sum G (Tc + Tp) + Tr)/sum G - Tc, i.e. a gain-weighted Friis
        friis.append(np.mean(g * (290.0 + c.tp_k) + c.tr_k) / np.mean(g) - 290.0)
    assert te == pytest.approx(np.array(friis), rel=0.06)
    assert np.array(friis) == pytest.approx(ct.chain_temp_k, rel=0.05)


# ---- stations, images, DC, ppm, quantisation, clipping ---------------------------------------------

def test_station_power_follows_level_gain_and_full_scale():
    # Parseval: a carrier of amplitude A has power A^2. Level -80 dBm, G(94.5 MHz) = 20 dB and
    # full scale -40 dBm give -80 + 20 + 40 = -20 dBFS (a 300 kHz band holds all of it).
    sc = _scene(receiver={"nf_db": 9.0, "full_scale_dbm": -40.0},
                station=[{"name": "A", "freq_mhz": 94.5, "level_dbm": -80.0, "stereo": True}])
    src = SimulatedSource(sc, "peaked", seed=4)
    src.tune(94.0e6)
    off, psd = _psd(src.read(240_000))
    p = dsp.channel_power(off, psd, np.array([94.5e6 - src.lo_hz(94.0e6)]), 300e3)[0]
    assert 10 * np.log10(p) == pytest.approx(-80.0 + 20.0 + 40.0, abs=0.1)


def test_iq_imbalance_image_and_dc_spike():
    # y = mu x + nu conj(x): the image at -f is |nu/mu|^2 below the station (about -40 dB for
    # 0.1 dB / 1 degree); the DC offset puts |dc|^2 at 0 Hz.
    sc = _scene(receiver={"nf_db": 6.0, "full_scale_dbm": -60.0, "dc_offset": [0.01, -0.005],
                          "amplitude_imbalance_db": 0.3, "phase_imbalance_deg": 3.0},
                outside_noise={"temp_k": 300.0},
                station=[{"name": "A", "freq_mhz": 95.4, "level_dbm": -70.0}])
    src = SimulatedSource(sc, "bare", seed=4)
    src.tune(95.0e6)
    off, psd = _psd(src.read(240_000))
    fb = 95.4e6 - src.lo_hz(95.0e6)
    p_main, p_image = dsp.channel_power(off, psd, np.array([fb, -fb]), 200e3)
    mu, nu = sc.receiver.iq_mu_nu
    noise = src.truth(95e6, [95e6 - 0.4e6], 200e3)[0].noise_dbfs
    image_only = p_image - 10 ** (noise / 10)
    assert 10 * np.log10(image_only / p_main) == pytest.approx(10 * np.log10(abs(nu) ** 2 / abs(mu) ** 2), abs=1.0)
    dc_band = np.abs(off) < 3 * FS / 2048
    dc_power = (psd[dc_band].sum() - np.median(psd) * dc_band.sum()) * (FS / 2048)
    assert 10 * np.log10(dc_power) == pytest.approx(10 * np.log10(0.01**2 + 0.005**2), abs=0.5)
    assert psd[np.argmin(np.abs(off))] > 30 * np.median(psd)


def test_ppm_error_shifts_every_frequency():
    # A local oscillator fast by ppm moves a line at f to f - f_LO (1 + ppm 1e-6) at baseband.
    sc = _scene(receiver={"nf_db": 6.0, "full_scale_dbm": -60.0, "ppm": 50.0},
                preamp={"osc": {"gain_db": 10.0, "nf_db": 2.0, "circuits": [{"f0_hz": 100e6, "q": 5.0}],
                                "oscillation": {"freq_hz": 100.3e6, "level_dbm": -80.0}}})
    src = SimulatedSource(sc, "osc", "terminated", seed=1)
    src.tune(100e6)
    off, psd = _psd(src.read(240_000), fft_size=8192)
    peak = off[np.argmax(np.where(np.abs(off) > 50e3, psd, 0))]
    assert peak == pytest.approx(0.3e6 - 50e-6 * 100e6, abs=FS / 8192)


def test_strong_station_clips_at_the_rails():
    sc = _scene(station=[{"name": "Loud", "freq_mhz": 95.3, "level_dbm": -54.0}])
    src = SimulatedSource(sc, "bare", seed=1)
    src.tune(95e6)
    b = src.read(48_000)
    assert dsp.clip_fraction(b.raw, "cu8") > 0.01
    quiet = SimulatedSource(sc.with_station_levels(-20.0), "bare", seed=1)
    quiet.tune(95e6)
    assert dsp.clip_fraction(quiet.read(48_000).raw, "cu8") == 0.0


def test_quantisation_noise_is_real_and_in_the_truth():
    # Thermal noise far below one step, a station dithering the ADC: the measured floor is the
    # uniform quantisation noise 2 (LSB^2/12)/fs (LSB = 1/127.5) that the truth includes.
    sc = _scene(receiver={"nf_db": 6.0, "full_scale_dbm": -20.0, "dc_offset": [0.0, 0.0]},
                outside_noise={"temp_k": 300.0},
                station=[{"name": "A", "freq_mhz": 95.3, "level_dbm": -35.0}])
    src = SimulatedSource(sc, "bare", seed=9)
    src.tune(95e6)
    off, psd = _psd(src.read(240_000))
    t = src.truth(95e6, [94.5e6], 200e3)[0]
    assert t.quantisation_dbfs - t.thermal_dbfs > 20.0
    band = (off > -0.65e6) & (off < -0.35e6)
    measured = psd[band].mean() * 200e3
    assert 10 * np.log10(measured) == pytest.approx(t.noise_dbfs, abs=0.3)
    assert t.noise_dbfs == pytest.approx(10 * np.log10(2 * LSB_FS**2 / 12 / FS * 200e3), abs=0.01)


def test_quantiser_model_limits():
    # Uniform limit (Widrow): alpha = 1, distortion LSB^2/12 per rail. Sign-quantiser limit of a
    # mid-riser (sigma << LSB, output +-LSB/2): Bussgang alpha = (LSB/2) sqrt(2/pi) / sigma and
    # distortion (LSB/2)^2 (1 - 2/pi) (Bussgang 1952, derived here for the two-level output).
    a, d = quantiser_gain_and_distortion(3.0 * LSB_FS)
    assert a == pytest.approx(1.0, abs=1e-4) and d == pytest.approx(LSB_FS**2 / 12, rel=1e-3)
    s_small = 0.05 * LSB_FS
    a, d = quantiser_gain_and_distortion(s_small)
    assert a == pytest.approx(0.5 * LSB_FS * np.sqrt(2 / np.pi) / s_small, rel=1e-3)
    assert d == pytest.approx((0.5 * LSB_FS) ** 2 * (1 - 2 / np.pi), rel=1e-3)


def test_truth_follows_quantisation_below_one_step():
    # Per-rail RMS about 0.4 LSB: the uniform model is 0.3 dB off here; the truth is not.
    sc = _scene(receiver={"nf_db": 9.0, "full_scale_dbm": -45.0, "dc_offset": [0.0, 0.0]})
    src = SimulatedSource(sc, "peaked", "noise-cold", seed=11)
    src.tune(94.5e6)
    x = src.render_complex(94.5e6, 480_000, 0.0)
    assert 0.3 < np.std(x.real) / LSB_FS < 0.5
    off, psd = _psd(src.read(480_000))
    freqs = np.array([94.2e6, 94.8e6, 95.2e6])
    p = dsp.channel_power(off, psd, freqs - src.lo_hz(94.5e6), 200e3)
    t = src.truth(94.5e6, freqs, 200e3)
    assert 10 * np.log10(p) == pytest.approx([r.noise_dbfs for r in t], abs=0.1)


def test_im3_products_rise_three_db_per_db():
    # Third-order intercept: P_IM3 = 2 P1 + P2 - 2 IIP3 (3 dB per dB when both tones move together).
    base = _scene(receiver={"nf_db": 9.0, "full_scale_dbm": -10.0, "dc_offset": [0.0, 0.0]},
                  outside_noise={"temp_k": 300.0},
                  preamp={"lin": {"gain_db": 10.0, "nf_db": 2.0, "iip3_dbm": -20.0,
                                  "circuits": [{"f0_hz": 96.2e6, "q": 2.0}]}},
                  station=[{"name": "F1", "freq_mhz": 96.0, "level_dbm": -36.0},
                           {"name": "F2", "freq_mhz": 96.4, "level_dbm": -36.0}])
    deltas = np.arange(0.0, 8.1, 2.0)
    measured_db = []
    expected_db = []
    for dlt in deltas:
        sc = base.with_station_levels(dlt)
        src = SimulatedSource(sc, "lin", seed=3)
        src.tune(96.2e6)
        block = src.read(240_000)
        assert dsp.clip_fraction(block.raw, "cu8") == 0.0
        off, psd = _psd(block)
        f_im = 2 * 96.0e6 - 96.4e6
        p = dsp.channel_power(off, psd, np.array([f_im - src.lo_hz(96.2e6)]), 200e3)[0]
        t = src.truth(96.2e6, [f_im], 200e3)[0]
        measured_db.append(10 * np.log10(p - 10 ** (t.noise_dbfs / 10)))
        expected_db.append(t.signal_dbfs)
        # absolute level: 2 P1 + P2 - 2 IIP3 at the input (tones weighted by the tuned circuit),
        # plus G at the product, times the product's share of power inside the 200 kHz channel
        shape = sc.preamps["lin"].shape(np.array([96.0e6, 96.4e6, f_im]))
        w = -36.0 + dlt + 10 * np.log10(shape[:2])
        p_dbm = 2 * w[0] + w[1] + 40.0 + 10.0 + 10 * np.log10(shape[2])
        offsets, frac = fm.occupancy(("im3", True, 75e3, True, 75e3), FS)
        share_db = 10 * np.log10(frac[np.abs(offsets) <= 100e3].sum())
        mu, _ = sc.receiver.iq_mu_nu  # the IQ-imbalance gain |mu|^2 applies to every signal
        assert t.signal_dbfs == pytest.approx(p_dbm + 10.0 + share_db + 10 * np.log10(abs(mu) ** 2), abs=0.02)
    slope = np.polyfit(deltas, measured_db, 1)[0]
    assert slope == pytest.approx(3.0, abs=0.1)
    assert np.array(measured_db) == pytest.approx(np.array(expected_db), abs=0.3)


# ---- the sweep engine against the truth ------------------------------------------------------------

_CROWDED = [  # (MHz, dBm): a crowded band, strongest near the peaked preamp's skirt
    (88.3, -84), (88.9, -95), (89.7, -90), (90.5, -99), (91.3, -86), (92.1, -97), (92.8, -89),
    (93.4, -94), (94.0, -98), (94.5, -101), (94.9, -92), (95.6, -96), (96.3, -88), (97.1, -100),
    (97.9, -91), (98.8, -85), (99.6, -97), (100.4, -93), (101.2, -87), (102.6, -99), (103.5, -90),
    (104.3, -96), (105.2, -84), (106.0, -94), (106.9, -98), (107.7, -89),
]


@pytest.fixture(scope="module")
def crowded_sweeps():
    sc = _scene(receiver={"nf_db": 9.0, "full_scale_dbm": -57.0},
                station=[{"name": f"S{i:02d}", "freq_mhz": f, "level_dbm": lvl, "stereo": i % 3 != 0}
                         for i, (f, lvl) in enumerate(_CROWDED)])
    settings = SweepSettings(band="europe", dwell_s=0.1)
    out = {}
    for cfg in ("bare", "peaked"):
        src = SimulatedSource(sc, cfg, seed=21)
        plan = plan_for_source(band_plan("europe"), src, settings)
        result = run_sweep(src, plan, settings, cfg, "antenna")
        start = {h.center_hz: h.started_s for h in src.history}
        rows = []
        for hop in plan.hops:
            truths = src.truth(hop.center_hz, hop.channels_hz, settings.channel_bw_hz, at_s=start[hop.center_hz])
            by_f = {c.freq_hz: c for c in result.channels if c.hop_index == hop.index}
            rows.extend((by_f[int(t.freq_hz)], t) for t in truths)
        out[cfg] = (sc, result, rows)
    return out


def _station_rows(sc, rows):
    fs = {int(round(s.freq_hz)) for s in sc.stations}
    return [(m, t) for m, t in rows if m.freq_hz in fs]


@pytest.mark.parametrize("cfg", ["bare", "peaked"])
def test_sweep_channel_power_matches_truth(crowded_sweeps, cfg):
    sc, result, rows = crowded_sweeps[cfg]
    assert result.complete and max(h.clip_fraction for h in result.hops) == 0.0
    strong = [(m, t) for m, t in _station_rows(sc, rows) if t.cn_db > 20.0]
    assert len(strong) >= (3 if cfg == "bare" else 1)
    for m, t in strong:
        p_true = 10 * np.log10(10 ** (t.signal_dbfs / 10) + 10 ** (t.noise_dbfs / 10))
        assert m.power_dbfs == pytest.approx(p_true, abs=0.3), m.freq_hz


@pytest.mark.parametrize("cfg", ["bare", "peaked"])
def test_sweep_noise_floor_matches_truth(crowded_sweeps, cfg):
    sc, result, rows = crowded_sweeps[cfg]
    errors = np.array([m.noise_dbfs - t.noise_dbfs for m, t in rows])
    assert np.median(np.abs(errors)) < 0.25
    bad = [(m.freq_hz, round(e, 2)) for (m, _), e in zip(rows, errors) if abs(e) > 0.5]
    assert not bad, bad


@pytest.mark.parametrize("cfg", ["bare", "peaked"])
def test_sweep_carrier_to_noise_matches_truth(crowded_sweeps, cfg):
    sc, result, rows = crowded_sweeps[cfg]
    checked = [(m, t) for m, t in _station_rows(sc, rows) if 6.0 <= t.cn_db <= 40.0]
    assert len(checked) >= 8
    bad = [(m.freq_hz, m.cn_db, round(t.cn_db, 2)) for m, t in checked
           if m.cn_db is None or abs(m.cn_db - t.cn_db) > 0.5]
    assert not bad, bad


def test_peaked_preamp_shapes_the_floor(crowded_sweeps):
    sc, result, rows = crowded_sweeps["peaked"]
    n = {int(t.freq_hz): t.noise_density_dbfs_hz for _, t in rows}
    assert n[94_500_000] - n[90_000_000] > 10.0  # the floor follows G(f) (Ta + Tp) + Tr


def test_truth_noise_equals_station_free_render(crowded_sweeps):
    # Independent of any floor estimator: the same hops rendered without stations (the thermal
    # noise draw does not depend on the stations) must hold the truth's noise in every channel;
    # the empty hop's truth differs only in the quantiser model (less dither without stations).
    sc, result, rows = crowded_sweeps["peaked"]
    empty = replace(sc, stations=())
    src = SimulatedSource(empty, "peaked", seed=21)
    settings = SweepSettings(band="europe", dwell_s=0.1)
    plan = plan_for_source(band_plan("europe"), src, settings)
    errors = []
    by_hop = {}
    for m, t in rows:
        by_hop.setdefault(m.hop_index, []).append(t)
    for hop in plan.hops:
        truths = by_hop[hop.index]
        block = SimulatedSource(empty, "peaked", seed=21)
        block.advance(truths[0].time_s)
        block.tune(hop.center_hz)
        off, psd = _psd(block.read(240_000))
        freqs = np.array([t.freq_hz for t in truths])
        p = dsp.channel_power(off, psd, freqs - block.lo_hz(hop.center_hz), 200e3)
        empty_truths = block.truth(hop.center_hz, freqs, 200e3)
        errors.extend(10 * np.log10(p) - [t.noise_dbfs for t in empty_truths])
    errors = np.array(errors)
    # radiometer: 1/sqrt(B tau) = 0.7 % (0.03 dB) per channel for 200 kHz x 0.1 s (Dicke 1946)
    assert np.abs(errors).max() < 0.15
    assert abs(errors.mean()) < 0.02
