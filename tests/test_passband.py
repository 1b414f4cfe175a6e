"""Passband fit, coverage and gain-curve loading (simulated data with known truth)."""

import numpy as np
import pytest

from analysis.errors import BadParameterError, FitError, MismatchError, NoDataError
from analysis.passband.fit import (
    TunedStage,
    cascade_response_db,
    coverage,
    curve_features,
    fit_passband,
)
from analysis.passband.report import analyse_passband
from analysis.passband.data import (
    SOURCE_FLOOR,
    SOURCE_NOISE,
    SOURCE_READINGS,
    SOURCE_STATIONS,
    load_gain_curve,
    load_readings_csv,
    reading_sigma_db,
    station_peaks,
)
from passband_truth import STATIONS_HZ, build_db, preamp_gain_db

HALF_POWER_DB = -10 * np.log10(2)


def _simulate(stages, gain_db, sigma_db, seed, f=None):
    f = np.arange(87.5e6, 108.01e6, 100e3) if f is None else f
    rng = np.random.default_rng(seed)
    return f, cascade_response_db(f, stages, gain_db) + rng.normal(0.0, sigma_db, f.size)


CASES = {
    "single": ([TunedStage(96.0e6, 30.0)], 15.0, 1),
    "sync pair": ([TunedStage(94.5e6, 47.0)] * 2, 20.0, 2),
    "stagger pair": ([TunedStage(92.0e6, 25.0), TunedStage(98.0e6, 27.0)], 18.0, 2),
    "sync triple": ([TunedStage(95.0e6, 40.0)] * 3, 22.0, 3),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_fit_recovers_simulated_preamp(name):
    stages, gain_db, n_true = CASES[name]
    f, g = _simulate(stages, gain_db, 0.3, seed=7)
    fit = fit_passband(f, g)
    truth = curve_features(stages, gain_db)
    assert fit.n_circuits == n_true, fit.candidates
    assert abs(fit.peak_hz - truth.peak_hz) < 0.2e6
    assert fit.bw_3db_hz == pytest.approx(truth.bw_3db_hz, rel=0.10)
    assert fit.peak_gain_db == pytest.approx(truth.peak_gain_db, abs=0.5)
    assert fit.residual_rms_db == pytest.approx(0.3, abs=0.1)
    assert fit.criterion == "BIC"
    assert fit.to_dict()["n_circuits"] == n_true


def test_fit_edges_are_half_power_points_of_fitted_curve():
    f, g = _simulate([TunedStage(94.5e6, 47.0)] * 2, 20.0, 0.0, seed=1)
    fit = fit_passband(f, g)
    lo, hi = fit.edges_3db_hz
    assert fit.response_db(np.array([lo, hi])) - fit.peak_gain_db == pytest.approx([HALF_POWER_DB] * 2, abs=1e-3)
    lo6, hi6 = fit.edges_6db_hz
    assert fit.response_db(np.array([lo6, hi6])) - fit.peak_gain_db == pytest.approx([-10 * np.log10(4)] * 2, abs=1e-3)
    assert fit.bw_6db_hz > fit.bw_3db_hz


def test_measured_case_from_practice(tmp_path):
    # Relative levels of a hand-peaked preamp (common practice, no source): 0 dB at 94.5 MHz,
    # -6 dB at 93.5 and 95.5 MHz, -36.9 dB at 88.0 MHz, -30.8 dB at 100.0 MHz.
    csv = tmp_path / "readings.csv"
    csv.write_text("freq_mhz,level_db\n88.0,-36.9\n93.5,-6\n94.5,0\n95.5,-6\n100.0,-30.8\n")
    curve = load_readings_csv(csv)
    assert curve.source == SOURCE_READINGS and curve.relative
    report = analyse_passband(curve, (88e6, 100e6))
    fit = report.fit
    assert fit.bw_6db_hz == pytest.approx(2.0e6, abs=0.3e6)
    assert fit.peak_hz == pytest.approx(94.5e6, abs=0.2e6)
    assert not report.coverage.target_covered
    assert report.coverage.ripple_db > 20.0
    # the stagger plan for 88-100 MHz with the same number of circuits covers the target with
    # the exact circuit response to within -3 dB plus 0.6 dB (stated tolerance at 13 % bandwidth)
    plan = report.plan
    assert plan.n_circuits == fit.n_circuits
    grid = np.linspace(88e6, 100e6, 1201)
    assert np.min(plan.response_db(grid)) > HALF_POWER_DB - 0.6
    assert plan.peak_gain_change_db < 0  # a wider band costs gain at a fixed gain-bandwidth


def test_reading_uncertainty_grows_down_the_skirt():
    # 0.2 dB plus 1 % of the peak amplitude (common practice, no source): 8.686*0.01/0.0143 at -36.9 dB
    s = reading_sigma_db(np.array([0.0, -6.0, -36.9]))
    assert s[0] == pytest.approx(np.hypot(0.2, 0.08686), rel=1e-3)
    assert s[2] == pytest.approx(np.hypot(0.2, 0.08686 / 10 ** (-36.9 / 20)), rel=1e-3)


def test_coverage_lists_stations_outside_passband():
    stages = [TunedStage(94.5e6, 47.0)] * 2
    f, g = _simulate(stages, 20.0, 0.0, seed=3)
    fit = fit_passband(f, g)
    cov = coverage(fit, (88e6, 100e6), stations_hz=[87.9e6, 90.0e6, 94.5e6, 94.9e6, 99.0e6, 101e6])
    assert cov.stations_in_target_hz == (90_000_000, 94_500_000, 94_900_000, 99_000_000)
    assert cov.covered_stations_hz == (94_500_000, 94_900_000)
    assert cov.uncovered_stations_hz == (90_000_000, 99_000_000)
    grid = np.linspace(88e6, 100e6, 2001)
    assert cov.ripple_db == pytest.approx(np.ptp(fit.response_db(grid)), abs=0.05)
    assert not cov.target_covered
    # a broad single circuit covers it
    wide = fit_passband(*_simulate([TunedStage(94e6, 3.0)], 10.0, 0.0, seed=3), max_circuits=1)
    assert coverage(wide, (88e6, 100e6)).target_covered


def test_fit_refuses_too_few_points():
    with pytest.raises(FitError, match="at least 3"):
        fit_passband([90e6, 95e6], [-3.0, 0.0])


def test_three_points_single_circuit_assumed():
    fit = fit_passband([93e6, 94.5e6, 96e6], [-3.0, 0.0, -3.0])
    assert fit.n_circuits == 1 and fit.criterion.startswith("none")
    assert fit.bw_3db_hz == pytest.approx(3.0e6, rel=0.02)


@pytest.mark.parametrize(
    "text, match",
    [
        ("freq,level\n88,0\n90,1\n92,2\n", "freq_mhz"),
        ("freq_mhz,level_db\n88,0\n90,abc\n92,2\n", "not two numbers"),
        ("freq_mhz,level_db\n88,0\n90,-1\n", "at least 3"),
        ("", "empty"),
    ],
)
def test_bad_csv(tmp_path, text, match):
    p = tmp_path / "bad.csv"
    p.write_text(text)
    with pytest.raises(BadParameterError, match=match) as info:
        load_readings_csv(p)
    assert "freq_mhz,level_db" in str(info.value)  # the expected format is named


# ------------------------------------------------------------------------- database paths

TRUE_STAGES = [TunedStage(94.5e6, 47.0)] * 2
TRUE_GAIN_DB = 20.0


@pytest.fixture(scope="module")
def db_full(tmp_path_factory):
    return build_db(tmp_path_factory.mktemp("pb") / "full.db", preamp_gain_db(TRUE_STAGES, TRUE_GAIN_DB),
                    inputs=("noise-hot", "noise-cold", "terminated", "antenna"))


def test_noise_source_dense_recovers_gain(db_full):
    curve = load_gain_curve(db_full, "bare", "preamp")
    assert curve.source == SOURCE_NOISE and curve.dense and not curve.relative
    truth_db = cascade_response_db(curve.freqs_hz, TRUE_STAGES, TRUE_GAIN_DB)
    near = truth_db > TRUE_GAIN_DB - 20
    # hot-minus-cold ratio of 2 sweeps x 64 averages: well within 0.5 dB near the peak; a DC
    # spike or the roll-off at hop edges slipping in would be off by many dB
    assert np.max(np.abs(curve.gain_db[near] - truth_db[near])) < 0.5
    report = analyse_passband(curve, (88e6, 100e6))
    truth = curve_features(TRUE_STAGES, TRUE_GAIN_DB)
    assert abs(report.fit.peak_hz - truth.peak_hz) < 0.2e6
    assert report.fit.bw_3db_hz == pytest.approx(truth.bw_3db_hz, rel=0.10)
    assert report.fit.peak_gain_db == pytest.approx(TRUE_GAIN_DB, abs=0.3)
    assert report.fit.n_circuits == 2
    in_target = [s for s in STATIONS_HZ if 88e6 <= s <= 100e6]
    assert set(report.coverage.stations_in_target_hz) <= set(int(s) for s in in_target)
    assert 94_500_000 in report.coverage.covered_stations_hz


def test_per_channel_noise_source_when_no_spectra(tmp_path):
    db = build_db(tmp_path / "nospec.db", preamp_gain_db(TRUE_STAGES, TRUE_GAIN_DB),
                  inputs=("noise-hot", "noise-cold"), keep_spectra=False)
    curve = load_gain_curve(db, "bare", "preamp")
    assert curve.source == SOURCE_NOISE and not curve.dense
    fit = analyse_passband(curve, (88e6, 100e6)).fit
    assert abs(fit.peak_hz - 94.5e6) < 0.2e6
    assert fit.bw_3db_hz == pytest.approx(curve_features(TRUE_STAGES).bw_3db_hz, rel=0.10)


def test_stations_and_floor_sources(db_full):
    st = load_gain_curve(db_full, "bare", "preamp", prefer="stations")
    assert st.source == SOURCE_STATIONS and not st.relative
    truth = cascade_response_db(st.freqs_hz, TRUE_STAGES, TRUE_GAIN_DB)
    assert np.max(np.abs(st.gain_db - truth)) < 1.0  # 0.3 dB fading per sweep
    fl = load_gain_curve(db_full, "bare", "preamp", prefer="noise-floor")
    assert fl.source == SOURCE_FLOOR and fl.relative and "shape only" in fl.source
    fit = analyse_passband(fl, (88e6, 100e6)).fit
    assert abs(fit.peak_hz - 94.5e6) < 0.2e6
    assert fit.bw_3db_hz == pytest.approx(curve_features(TRUE_STAGES).bw_3db_hz, rel=0.10)
    assert fit.floor_ratio > 0  # the receiver's own noise under the rise was modelled


def test_missing_labels_and_inputs(db_full, tmp_path):
    with pytest.raises(NoDataError, match=r"bare \(antenna: \d+ sweeps, noise-cold"):
        load_gain_curve(db_full, "bare", "nonesuch")
    only_ant = build_db(tmp_path / "ant.db", preamp_gain_db(TRUE_STAGES, TRUE_GAIN_DB), inputs=("antenna",))
    with pytest.raises(NoDataError):
        load_gain_curve(only_ant, "bare", "preamp", prefer="noise-source")
    with pytest.raises(BadParameterError):
        load_gain_curve(db_full, "bare", "bare")


def test_receiver_gain_mismatch_refused(tmp_path):
    db = build_db(tmp_path / "mix.db", preamp_gain_db(TRUE_STAGES, TRUE_GAIN_DB),
                  inputs=("noise-hot", "noise-cold"), receiver_gain_db=(30.0, 40.0))
    with pytest.raises(MismatchError, match="same --gain"):
        load_gain_curve(db, "bare", "preamp")


def test_floor_rise_per_channel_without_spectra(tmp_path):
    # terminated sweeps only, no spectra: the per-channel noise rise (G (Tamb+Tp) + Tr)/(Tamb+Tr)
    # is the gain shape plus a floor; the offset model recovers the shape
    db = build_db(tmp_path / "term.db", preamp_gain_db(TRUE_STAGES, TRUE_GAIN_DB), inputs=("terminated",),
                  keep_spectra=False)
    curve = load_gain_curve(db, "bare", "preamp")
    assert curve.source == SOURCE_FLOOR and not curve.dense and curve.relative
    fit = analyse_passband(curve, (88e6, 100e6)).fit
    assert abs(fit.peak_hz - 94.5e6) < 0.2e6
    assert fit.bw_3db_hz == pytest.approx(curve_features(TRUE_STAGES).bw_3db_hz, rel=0.10)
    assert fit.n_circuits == 2 and fit.residual_rms_db < 0.2
    # without the floor term the circuit model cannot follow the flat floor: it invents circuits
    # at the band edges and misses by more than a dB
    plain = fit_passband(curve.freqs_hz, curve.gain_db)
    assert plain.residual_rms_db > 5 * fit.residual_rms_db


def test_station_spill_into_raster_neighbours_counts_once():
    # 100 kHz raster, 200 kHz channels: a station at 90.2 MHz also lifts 90.1 and 90.3 MHz
    f = np.array([90.0e6, 90.1e6, 90.2e6, 90.3e6, 94.5e6])
    lev = np.array([np.nan, 30.0, 38.0, 31.0, 20.0])
    assert station_peaks(f, lev, 200e3).tolist() == [False, False, True, False, True]
    # 200 kHz raster (47 CFR 73.201): adjacent channels 200 kHz apart are separate stations
    f2 = np.array([88.1e6, 88.3e6, 88.5e6])
    assert station_peaks(f2, np.array([10.0, 12.0, 9.0]), 200e3).tolist() == [True, True, True]
