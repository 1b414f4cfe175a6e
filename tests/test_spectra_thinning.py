"""Stored spectra: full resolution for noise inputs, a thinned copy for antenna sweeps.

The thinned copy must keep what the analyses read (:mod:`survey.spectra_codec` lists it): band
integrals of the density, the floor shape, the narrow-line search, and give the same analysis
answers on the demo as full-resolution spectra, within the analyses' stated uncertainties,
at no more than 30 KB per replayed antenna sweep of the europe band.
"""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pytest

import synth_signals as ss
from diagnose_scenes import record, scene_with
from analysis.diagnose import diagnose
from analysis.passband.data import load_gain_curve
from bandcensus.cli import main
from bandcensus.demo import demo_recordings
from survey import dsp, spectra_codec
from survey.records import RunInfo
from survey.store import SurveyStore, read_spectra

FS = 2.4e6
FFT = 2048


def _hop_spectrum(seed=3, n=240_000):
    """A measured hop: noise, a 200 kHz-wide FM station and an unmodulated line, PSD in dBFS/Hz."""
    rng = np.random.default_rng(seed)
    z = ss.complex_noise(n, 1e-3, rng) + ss.fm_broadcast(n, FS, 400e3, 0.1, rng) + ss.tone(n, FS, -301_234.0, 0.01)
    offsets, psd = dsp.averaged_psd(z.astype(np.complex64), FS, FFT)
    return 98e6 + offsets, dsp.psd_to_dbfs_hz(psd)


def _band_power(freqs, psd_db, lo, hi):
    """Rectangle-rule integral of the linear density over [lo, hi) (bins whose centre is inside)."""
    inside = (freqs >= lo) & (freqs < hi)
    return float(np.sum(10.0 ** (psd_db[inside] / 10.0)) * (freqs[1] - freqs[0]))


def test_full_rows_are_the_historical_int16_centi_db():
    freqs, psd = _hop_spectrum()
    row = spectra_codec.encode(freqs, psd, "noise-hot", 98e6, FS, 0.75, 20e3)
    assert row.n_bins == FFT and len(row.blob) == 2 * FFT and row.bin_hz == pytest.approx(FS / FFT)
    f, values = spectra_codec.decode_row(row.f_start_hz, row.bin_hz, row.n_bins, row.blob)
    np.testing.assert_array_equal(f, row.f_start_hz + row.bin_hz * np.arange(FFT))
    # the format every database so far holds: int16 hundredths of a dB
    expected = np.round(psd.astype(np.float64) * 100.0).astype("<i2").astype(np.float64) / 100.0
    np.testing.assert_array_equal(values, expected)


def test_thinned_rows_keep_band_integrals_and_the_bin_grid():
    freqs, psd = _hop_spectrum()
    row = spectra_codec.encode(freqs, psd, "antenna", 98e6, FS, 0.75, 20e3)
    assert len(row.blob) <= FFT * 0.75 / spectra_codec.THIN_BINS + 16  # one byte per group of the usable span
    f, values = spectra_codec.decode_row(row.f_start_hz, row.bin_hz, row.n_bins, row.blob)
    # back on the FFT bin grid it was measured on
    k0 = int(np.argmin(np.abs(freqs - f[0])))
    np.testing.assert_allclose(f, freqs[k0:k0 + f.size], rtol=0, atol=1e-3)
    # channel powers (200 kHz) over the usable span: the group mean keeps the integral, so only
    # the one-byte rounding remains: at most half a step (0.25 dB) when one group holds the
    # band's power (the line), far less where many groups share it (noise, the FM station)
    errors = []
    for lo in np.arange(98e6 - 880e3, 98e6 + 700e3, 200e3):
        if abs(lo + 100e3 - 98e6) < 120e3:
            continue  # the DC guard
        ref = _band_power(freqs, psd, lo, lo + 200e3)
        got = _band_power(f, values, lo, lo + 200e3)
        errors.append(10 * np.log10(got / ref))
    errors = np.abs(errors)
    assert errors.max() <= spectra_codec.THIN_STEP_DB / 2 and np.median(errors) < 0.05, errors


def test_excluded_bins_do_not_leak_into_kept_groups():
    freqs, psd = _hop_spectrum()
    psd = psd.copy()
    centre = np.argmin(np.abs(freqs - 98e6))
    psd[centre - 2:centre + 3] = 0.0  # a DC spike 60+ dB above the floor
    psd[:10] = 0.0  # and a strong alias at the hop edge
    row = spectra_codec.encode(freqs, psd, "antenna", 98e6, FS, 0.75, 20e3)
    f, values = spectra_codec.decode_row(row.f_start_hz, row.bin_hz, row.n_bins, row.blob)
    off = np.abs(f - 98e6)
    kept = (off >= 20e3) & (off <= 0.75 * FS / 2)
    assert values[kept].max() < -40.0  # the spike and the alias stayed out
    assert f.min() > freqs[10] and off.max() <= 0.75 * FS / 2 + FS / FFT * spectra_codec.THIN_BINS


def test_narrow_line_stays_a_narrow_line_within_one_group():
    freqs, psd = _hop_spectrum()
    row = spectra_codec.encode(freqs, psd, "antenna", 98e6, FS, 0.75, 20e3)
    f, values = spectra_codec.decode_row(row.f_start_hz, row.bin_hz, row.n_bins, row.blob)
    near = np.abs(f - (98e6 - 301_234.0)) < 15e3
    peak = f[near][np.argmax(values[near])]
    assert abs(peak - (98e6 - 301_234.0)) <= 2 * FS / FFT * spectra_codec.THIN_BINS
    # contrast against the floor: the group mean spreads the line's power over its group
    # (module doc: 4 to 7 dB less), the floor stays where it was
    contrast = values[near].max() - np.median(values[np.abs(f - 98e6 + 150e3) < 30e3])
    full_near = np.abs(freqs - (98e6 - 301_234.0)) < 15e3
    full_contrast = psd[full_near].max() - np.median(psd[np.abs(freqs - 98e6 + 150e3) < 30e3])
    assert 3.0 <= full_contrast - contrast <= 7.5, (full_contrast, contrast)


def test_old_rows_read_back_unchanged(tmp_path):
    # a row written the historical way (int16 centi-dB, straight SQL): still read as before
    db = tmp_path / "old.db"
    with SurveyStore(db) as store:
        run = store.begin_run(RunInfo(source_kind="recording", device="x", tool_version="0", settings={}))
        store.conn.execute(
            "INSERT INTO sweeps (run_id, sequence, configuration, input, started_utc, ended_utc, complete, band,"
            " channel_bw_hz, sample_rate_hz, dwell_s, settle_s, fft_size, usable_fraction, dc_guard_hz, ppm,"
            " received_margin_db) VALUES (?,0,'bare','antenna','t','t',1,'europe',2e5,2.4e6,0.1,0,2048,0.75,2e4,0,6)",
            (run,))
        values = np.array([-11050, -11000, -3000, 12], "<i2")
        store.conn.execute("INSERT INTO spectra VALUES (1, 0, 88e6, 1000.0, 4, ?)", (values.tobytes(),))
    conn = sqlite3.connect(db)
    (f, psd), = read_spectra(conn, 1)
    conn.close()
    np.testing.assert_array_equal(f, 88e6 + 1000.0 * np.arange(4))
    np.testing.assert_array_equal(psd, values.astype(np.float32) / np.float32(100.0))


# ------------------------------------------------------------------------- the demo, before/after

@pytest.fixture(scope="module")
def demo_dbs(tmp_path_factory):
    """The demo replayed twice: every spectrum at full resolution, and as stored now."""
    folder = tmp_path_factory.mktemp("thinning")
    metas = [str(p) for p in demo_recordings()]
    full, thinned = folder / "full.db", folder / "thinned.db"
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(spectra_codec, "THINNED_INPUTS", ())
        assert main(["replay", *metas, "--db", str(full), "--quiet"]) == 0
    assert main(["replay", *metas, "--db", str(thinned), "--quiet"]) == 0
    return full, thinned


def _json(capsys, argv):
    capsys.readouterr()
    assert main([*argv, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


@pytest.mark.parametrize("test", ["preamp-peaked", "preamp-staggered"])
@pytest.mark.parametrize("source", ["best", "noise-floor"])
def test_demo_passband_is_the_same_within_its_uncertainty(demo_dbs, capsys, test, source):
    full, thinned = demo_dbs
    answers = []
    for db in (full, thinned):
        answers.append(_json(capsys, ["passband", "--db", str(db), "--base", "bare", "--test", test,
                                      "--target", "88-100", "--source", source]))
    a, b = answers
    if "target_covered" not in a:
        # the fit was not trusted on the full-resolution data: the thinned data must say the same
        assert a["verdict"] == b["verdict"] == "not enough data to fit", (a, b)
        assert a["source"] == b["source"] and a["n_points"] == b["n_points"]
        return
    assert (a["source"], a["target_covered"], a["uncovered_stations_hz"]) == \
           (b["source"], b["target_covered"], b["uncovered_stations_hz"])
    # each gain point within its stated standard uncertainty (the library's sigma_db)
    prefer = None if source == "best" else source
    curve = load_gain_curve(full, "bare", test, prefer=prefer)
    ga = np.array([p["gain_db"] for p in a["points"]])
    gb = np.array([p["gain_db"] for p in b["points"]])
    assert ga.size == gb.size == curve.n_points
    assert np.all(np.abs(ga - gb) <= np.maximum(curve.sigma_db, 0.05))
    # the features the verdict quotes, to a small fraction of the 100 kHz bins they come from
    assert abs(a["peak_hz"] - b["peak_hz"]) < 20e3
    for key in ("bw_3db_hz", "bw_6db_hz"):
        assert abs(a[key] - b[key]) < 20e3, key


def test_demo_diagnosis_is_the_same(demo_dbs, capsys):
    full, thinned = demo_dbs
    found = []
    for db in (full, thinned):
        d = _json(capsys, ["diagnose", "--db", str(db), "--base", "bare", "--test", "preamp-bench-supply",
                           "--enr-db", "15"])
        found.append(sorted((f["kind"], f["freq_hz"], f["severity"]) for f in d["findings"]))
    assert found[0] == found[1] and ("added-noise", None, "problem") in found[0]


def test_a_replayed_antenna_sweep_takes_at_most_30_kb(tmp_path):
    antenna = [str(p) for p in demo_recordings() if p.name.endswith("_antenna.sigmf-meta")][:8]
    empty, filled = tmp_path / "empty.db", tmp_path / "filled.db"
    assert main(["replay", antenna[0], "--db", str(empty), "--quiet"]) == 0
    assert main(["replay", *antenna, "--db", str(filled), "--quiet"]) == 0
    per_sweep = (filled.stat().st_size - empty.stat().st_size) / (len(antenna) - 1)
    assert per_sweep <= 30 * 1024, per_sweep


def test_oscillation_is_found_from_thinned_antenna_spectra_alone(tmp_path):
    # the same oscillating-preamp scene as the diagnosis tests, but with no terminated sweeps:
    # only thinned antenna spectra to search. The finding states 10 kHz of frequency uncertainty.
    osc_hz = 97.337e6
    scene = scene_with(osc={"based_on": "clean", "oscillation": {"freq_hz": osc_hz, "level_dbm": -90.0}})
    db = record(tmp_path / "osc.db", [(scene, "bare", "bare", "antenna", True), (scene, "osc", "osc", "antenna", True)])
    conn = sqlite3.connect(db)
    blobs = [(bytes(b), n) for b, n in conn.execute("SELECT psd_centi_dbfs_hz, n_bins FROM spectra")]
    conn.close()
    assert blobs and all(spectra_codec.is_thinned(b, n) for b, n in blobs)
    osc = diagnose(db, "bare", "osc").of_kind("oscillation")
    assert len(osc) == 1 and osc[0].severity == "problem"
    assert abs(osc[0].freq_hz - osc_hz) <= osc[0].evidence["freq_uncertainty_hz"]
    # level: -90 dBm at a full scale of -62.7 dBm is -27.3 dBFS (as with full spectra)
    assert osc[0].evidence["level_dbfs"] == pytest.approx(-27.3, abs=1.0)
