"""Fault diagnosis against simulated truth (SIMULATED scenes with invented stations).

Each fault is injected into the simulator (survey/scene.py): clipping by preamp gain, third-order
intermodulation by a low IIP3, an oscillation line, supply noise after the preamp. The checks
must name the right kind at the right frequency, and nothing on a clean preamp.
"""

from __future__ import annotations

import copy
import math
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

sys.path.insert(0, str(Path(__file__).parent))

from diagnose_scenes import attenuated, base_doc, record, scene_from, scene_with  # noqa: E402

from analysis.diagnose import checks as checks  # noqa: E402
from analysis.diagnose.core import Diagnosis, Finding, summarise_findings  # noqa: E402
from analysis.diagnose.data import gain_model, summarise_channels  # noqa: E402
from analysis.diagnose.noise_checks import fit_unshaped_floor  # noqa: E402
from analysis.errors import BadParameterError, NoDataError  # noqa: E402
from analysis.passband.data import load_gain_curve  # noqa: E402
from analysis.selection import Survey  # noqa: E402
from analysis.workflows import diagnose_chain as diagnose  # noqa: E402

OSC_HZ = 97.337e6
SUPPLY_K = 20_000.0
RX_NF_DB = 7.0

SCENE = scene_with(
    im={"based_on": "clean", "iip3_dbm": -83.0},
    osc={"based_on": "clean", "oscillation": {"freq_hz": OSC_HZ, "level_dbm": -90.0}},
    supply={"based_on": "peaked", "supply_noise_k": SUPPLY_K},
    hot={"based_on": "clean", "gain_db": 30.0},
)


def _db(tmp_path_factory, name: str, test: str, *, spectra: bool = False, terminated: bool = True,
        extra: tuple = ()) -> Path:
    path = tmp_path_factory.mktemp(name) / "survey.db"
    runs = [(SCENE, "bare", "bare", "antenna", spectra), (SCENE, test, test, "antenna", spectra)]
    if terminated:
        runs += [(SCENE, "bare", "bare", "terminated", True), (SCENE, test, test, "terminated", True)]
    return record(path, runs + list(extra))


@pytest.fixture(scope="module")
def clean_db(tmp_path_factory):
    path = tmp_path_factory.mktemp("clean") / "survey.db"
    return record(path, [(SCENE, c, c, i, False) for c in ("bare", "clean", "peaked") for i in ("antenna", "terminated")])


@pytest.fixture(scope="module")
def im_db(tmp_path_factory):
    return _db(tmp_path_factory, "im", "im", extra=((attenuated(SCENE, 4.0), "im", "im-att4", "antenna", False),))


@pytest.fixture(scope="module")
def supply_db(tmp_path_factory):
    return _db(tmp_path_factory, "supply", "supply")


# --------------------------------------------------------------------------- clean preamps
@pytest.mark.parametrize("test", ["clean", "peaked"])
def test_clean_preamp_has_no_finding(clean_db, test):
    d = diagnose(clean_db, "bare", test, receiver_nf_db=RX_NF_DB)
    assert d.findings == ()
    kinds = [c.split(":")[0] for c in d.checked]
    # the four chain checks, then whether the passband covers the stations heard in the band plan
    assert kinds == ["clipping", "intermodulation", "oscillation", "added-noise", "passband coverage"]
    assert "0 of" in d.checked[0]


# ----------------------------------------------------------------------------------- clipping
def test_clipping_found_in_the_hop_of_the_strong_stations(tmp_path_factory):
    d = diagnose(_db(tmp_path_factory, "hot", "hot", terminated=False), "bare", "hot")
    clip = d.of_kind("clipping")
    assert len(clip) == 1 and clip[0].severity == "problem"
    ev = clip[0].evidence
    assert ev["max_clip_fraction"] > 1e-4 and ev["base_max_clip_fraction"] <= 1e-4
    # the worst hop holds the two strong stations (96.0 and 96.8 MHz) in its 2.4 MHz span
    assert abs(clip[0].freq_hz - 96.4e6) < 1.2e6
    assert 3.0 <= ev["suggested_gain_reduction_db"] <= 40.0
    # channel-level rises caused by clipping are not called oscillations
    assert not [f for f in d.findings if f.kind == "oscillation"]


def test_gain_reduction_follows_the_gaussian_model():
    # Gaussian rail: p = erfc(a / (sqrt 2 sigma)) = 2 Q(a / sigma) (scipy.stats.norm.sf)
    for p in (1e-5, 1e-3, 0.05):
        sigma = checks.gaussian_rail_sigma(p)
        assert math.isclose(2.0 * scipy.stats.norm.sf(checks.RAIL_FS / sigma), p, rel_tol=1e-9)
    # at the threshold itself the reduction to a tenth of it is small; far above it, large
    assert checks.suggested_gain_reduction_db(1.1e-4, 1e-4) == 3.0
    big = checks.suggested_gain_reduction_db(0.3, 1e-4)
    assert 10.0 <= big <= 16.0


# --------------------------------------------------------------------------- intermodulation
def test_im3_products_found_at_2f1_minus_f2_and_confirmed_by_the_attenuator(im_db):
    d = diagnose(im_db, "bare", "im", attenuated="im-att4", attenuation_db=4.0)
    im = {round(f.freq_hz): f for f in d.of_kind("intermodulation")}
    # truth: carriers at 96.0 and 96.8 MHz give products at 95.2 and 97.6 MHz
    assert set(im) == {95_200_000, 97_600_000}
    for f in im.values():
        ev = f.evidence
        assert f.severity == "problem"
        assert {ev["carrier1_freq_hz"], ev["carrier2_freq_hz"]} == {96.0e6, 96.8e6}
        # stations drop by X, third-order products by 3X (P_IM3 = 3 P_in - 2 IIP3)
        assert ev["carrier_drop_db"] == pytest.approx(4.0, abs=0.3)
        assert ev["product_drop_db"] == pytest.approx(12.0, abs=1.5)
        assert ev["expected_third_order_rise_db"] == pytest.approx(3 * ev["expected_linear_rise_db"], abs=1.0)
    assert not d.of_kind("oscillation") and not d.of_kind("clipping")


def test_im3_without_attenuator_is_a_warning(im_db):
    d = diagnose(im_db, "bare", "im")
    im = d.of_kind("intermodulation")
    assert sorted(round(f.freq_hz) for f in im) == [95_200_000, 97_600_000]
    assert all(f.severity == "warning" and "attenuator" in f.advice for f in im)


def test_attenuator_law_classifies_drops():
    assert checks.attenuator_law(18.2, False, 6.0) == "third-order"
    assert checks.attenuator_law(6.3, False, 6.0) == "linear"
    assert checks.attenuator_law(0.4, False, 6.0) == "internal"
    assert checks.attenuator_law(13.0, True, 6.0) == "third-order"
    assert checks.attenuator_law(9.0, True, 6.0) == "undetermined"


def test_iq_image_is_not_called_intermodulation(tmp_path):
    # A loud station at 98.0 MHz on the peak of a narrow preamp, measured from the hop centred at
    # 97.2 MHz, mirrors to 96.4 MHz (2 fc - f), which is also 2 x 98.0 - 99.6 MHz: a trap.
    doc = copy.deepcopy(base_doc())
    doc["receiver"].update(amplitude_imbalance_db=1.0, phase_imbalance_deg=5.0)
    doc["preamp"]["narrow"] = {"gain_db": 10.0, "nf_db": 1.0,
                               "circuits": [{"f0_hz": 98.0e6, "q": 60.0}, {"f0_hz": 98.0e6, "q": 60.0}]}
    doc["station"] = [s for s in doc["station"] if s["freq_mhz"] != 99.5] + [
        {"name": "Loud Local", "freq_mhz": 98.0, "level_dbm": -78.0},
        {"name": "Far Hill", "freq_mhz": 99.6, "level_dbm": -86.0}]
    sc = scene_from(doc)
    db = record(tmp_path / "img.db", [(sc, "bare", "bare", "antenna", False), (sc, "narrow", "narrow", "antenna", False)])
    d = diagnose(db, "bare", "narrow")
    assert not d.of_kind("intermodulation")
    assert any("96.400 MHz is the IQ image of 98.000 MHz" in n for n in d.notes)
    # without the image check the same data would be called a product: the trap is real
    with Survey(db) as survey:
        b, t = summarise_channels(survey, "bare", "antenna"), summarise_channels(survey, "narrow", "antenna")
    g, _ = gain_model(load_gain_curve(db, "bare", "narrow"))
    naive, *_ = checks.check_intermodulation(b, t, g, [])
    assert [round(f.freq_hz) for f in naive] == [96_400_000]


# ------------------------------------------------------------------------------- oscillation
def test_oscillation_found_within_10_khz_from_spectra(tmp_path_factory):
    d = diagnose(_db(tmp_path_factory, "osc", "osc", spectra=True), "bare", "osc")
    osc = d.of_kind("oscillation")
    assert len(osc) == 1 and osc[0].severity == "problem"
    assert abs(osc[0].freq_hz - OSC_HZ) <= 10e3
    # level: -90 dBm at a full scale of -62.7 dBm is -27.3 dBFS
    assert osc[0].evidence["level_dbfs"] == pytest.approx(-27.3, abs=1.0)
    assert osc[0].evidence["power_in_line_fraction"] > 0.8
    assert not d.of_kind("intermodulation")


def test_oscillation_from_channels_alone_is_low_confidence(tmp_path_factory):
    d = diagnose(_db(tmp_path_factory, "osc-ch", "osc", terminated=False), "bare", "osc")
    osc = d.of_kind("oscillation")
    assert len(osc) == 1 and osc[0].severity == "warning" and "low confidence" in osc[0].advice
    assert abs(osc[0].freq_hz - OSC_HZ) <= osc[0].evidence["freq_uncertainty_hz"] + 10e3


def test_strong_genuine_station_is_not_an_oscillation(tmp_path):
    # a wide FM station that is on air only during the test sweeps (base scene lacks it)
    doc = copy.deepcopy(base_doc())
    base_scene = scene_from(doc)
    doc["station"].append({"name": "New Voice", "freq_mhz": 97.5, "level_dbm": -84.0, "stereo": True})
    test_scene = scene_from(doc)
    db = record(tmp_path / "new.db", [(base_scene, "bare", "bare", "antenna", True),
                                      (test_scene, "clean", "clean", "antenna", True)])
    d = diagnose(db, "bare", "clean")
    assert not d.of_kind("oscillation")
    assert "1 line" not in d.checked[2] and "0 line(s)" in d.checked[2]


# ------------------------------------------------------------------------------- added noise
def test_supply_noise_found_in_kelvin(supply_db):
    d = diagnose(supply_db, "bare", "supply", receiver_nf_db=RX_NF_DB)
    (f,) = d.of_kind("added-noise")
    assert f.freq_hz is None and f.severity == "problem"
    assert f.evidence["added_noise_k"] == pytest.approx(SUPPLY_K, rel=0.05)
    assert f.evidence["lost_cn_median_db"] > 1.0
    assert "battery" in f.advice
    assert len(d.findings) == 1


def test_supply_noise_without_receiver_nf_is_a_lower_bound(supply_db):
    d = diagnose(supply_db, "bare", "supply")
    (f,) = d.of_kind("added-noise")
    assert "added_noise_k" not in f.evidence
    assert 290.0 < f.evidence["added_noise_min_k"] < SUPPLY_K


def test_unshaped_floor_fit_recovers_known_parts():
    # exact model N_t = G N_b + a G + beta with seeded 1 % scatter
    rng = np.random.default_rng(5)
    g = 10 ** (np.linspace(-1.5, 1.0, 60))
    nb = 1e-5 * (1.0 + 0.1 * np.linspace(0, 1, 60))
    a, beta = -2e-6, 4e-6
    nt = (g * nb + a * g + beta) * (1.0 + 0.01 * rng.standard_normal(60))
    fit = fit_unshaped_floor(g, nb, nt, seed=1)
    assert fit["beta"] == pytest.approx(beta, rel=0.05)
    assert fit["a"] == pytest.approx(a, rel=0.1)
    # a flat gain cannot separate the parts: the covariance says so
    g_flat = 3.0 * (1.0 + 0.01 * np.linspace(0, 1, 60))
    flat = fit_unshaped_floor(g_flat, nb, (g_flat * nb + a * g_flat + beta) * (1.0 + 0.01 * rng.standard_normal(60)))
    assert flat["beta_sigma_ls"] > 10 * fit["beta_sigma_ls"]
    assert fit_unshaped_floor(np.full(60, 3.0), nb, nt)["beta_sigma_ls"] == np.inf


# ------------------------------------------------------------------------ model and helpers
def test_finding_validates_kind_and_severity():
    with pytest.raises(BadParameterError):
        Finding("spur", None, "info", {}, "x")
    with pytest.raises(BadParameterError):
        Finding("clipping", None, "fatal", {}, "x")


def test_summarise_findings_one_line_each():
    fs = [Finding("oscillation", 97.337e6, "problem", {"level_dbfs": -42.3}, "a"),
          Finding("added-noise", None, "warning", {"excess_db": 3.0, "added_noise_k": 900.0,
                                                    "lost_cn_median_db": 0.8}, "b")]
    lines = summarise_findings(fs)
    assert lines == ["problem: oscillation at 97.337 MHz (line at -42.3 dBFS)",
                     "warning: added-noise (3.0 dB above the receiver's own floor, about 900 K, "
                     "0.8 dB of C/N lost (median))"]
    d = Diagnosis("bare", "x", tuple(fs), ("c",))
    assert d.to_dict()["findings"][1]["freq_hz"] is None


def test_bad_parameters_and_missing_labels(clean_db):
    with pytest.raises(NoDataError, match="no complete sweeps of configuration 'nope'"):
        diagnose(clean_db, "bare", "nope")
    with pytest.raises(BadParameterError, match="attenuation"):
        diagnose(clean_db, "bare", "clean", attenuated="clean")
    with pytest.raises(BadParameterError):
        diagnose(clean_db, "bare", "bare")
    with pytest.raises(BadParameterError):
        diagnose(clean_db, "bare", "clean", clip_threshold=2.0)
