"""One station's C/N over time: the library series and the ``history`` command as the user sees it."""

import csv
import io
import json
import math

import numpy as np
import pytest

from analysis.errors import NoDataError
from analysis.history import station_history, summarise_series
from bandcensus.cli import main
from survey.records import ChannelReading, EmissionReading, HopReading, RunInfo, SweepResult, SweepSettings
from survey.store import SurveyStore

FREQS = (97_100_000, 97_200_000, 97_300_000)
NOISE_DBFS = -60.0
# the station at 97.2 MHz through the night: C/N per sweep (None: P equals N, not measurable)
BARE_CN = [20.0, 14.0, 8.0, 2.0, None, 35.0]
PREAMP_CN = [24.0, 18.0, 12.5, 6.0, 1.0, 38.0]


def _result(label: str, cn_db, minute: int, gain_db=29.7) -> SweepResult:
    channels = []
    for f in FREQS:
        if f == 97_200_000 and cn_db is not None:
            power = NOISE_DBFS + 10 * math.log10(1 + 10 ** (cn_db / 10))
        else:
            power = NOISE_DBFS
        cn = None if cn_db is None or f != 97_200_000 else cn_db
        ok = cn is not None and cn >= 3.0
        channels.append(ChannelReading(f, 0, power, NOISE_DBFS, NOISE_DBFS - 53.0, cn if ok else None, ok))
    t = f"2026-01-01T{minute // 60:02d}:{minute % 60:02d}:00.000000Z"
    hop = HopReading(0, 97.6e6, 2.4e6, 240_000, 0.0, -113.0, t)
    # the station as an emission (kept below the detection margin too); none where P equals N
    emissions = () if cn_db is None else (EmissionReading(
        97_200_000.0, 0, "fm", 150e3, NOISE_DBFS + 10 * math.log10(1 + 10 ** (cn_db / 10)), NOISE_DBFS, cn_db,
        None, False, 97_200_000),)
    return SweepResult(label, "antenna", t, t, SweepSettings(band="europe", gain_db=gain_db), (hop,),
                       tuple(channels), emissions=emissions)


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = tmp_path_factory.mktemp("history") / "night.db"
    with SurveyStore(path) as store:
        run = store.begin_run(RunInfo("simulated", "test", "test", {}))
        for k, (b, p) in enumerate(zip(BARE_CN, PREAMP_CN)):
            store.write_sweep(run, _result("bare", b, 60 * k))
            store.write_sweep(run, _result("preamp-a", p, 60 * k + 30))
        store.end_run(run)
    return path


def test_series_follow_the_sweeps_in_time_order(db):
    history = station_history(db, 97.23e6)
    assert [s.configuration for s in history.series] == ["bare", "preamp-a"]
    bare, pre = history.series
    assert bare.freq_hz == 97_200_000 and bare.n_sweeps == 6
    expected = np.array([np.nan if c is None else c for c in BARE_CN])
    assert np.allclose(bare.cn_db, expected, atol=1e-3, equal_nan=True)
    assert bare.detected.tolist() == [True, True, True, False, False, True]
    assert np.allclose(pre.cn_db, PREAMP_CN, atol=1e-3)
    assert list(bare.started_utc) == sorted(bare.started_utc)


def test_summary_counts_and_percentiles(db):
    bare, pre = station_history(db, 97.2e6).series
    s = summarise_series(bare)
    measured = [c for c in BARE_CN if c is not None]
    assert s["sweeps"] == 6 and s["cn_measured"] == 5
    assert s["detected_fraction"] == pytest.approx(4 / 6)
    assert s["listenable_mono_fraction"] == pytest.approx(3 / 6)   # 20, 14, 35 >= 12
    assert s["listenable_stereo_fraction"] == pytest.approx(1 / 6)  # 35 >= 32
    assert s["cn_median_db"] == pytest.approx(float(np.median(measured)), abs=1e-3)
    assert s["cn_p10_db"] == pytest.approx(float(np.percentile(measured, 10)), abs=1e-3)
    assert summarise_series(pre)["listenable_mono_fraction"] == pytest.approx(4 / 6)


def test_command_prints_the_summary_first(db, capsys):
    assert main(["history", "--db", str(db), "--station", "97.2"]) == 0
    out = capsys.readouterr().out
    lines = out.splitlines()
    assert lines[0] == ("Station at 97.20 MHz (antenna): 12 sweeps in 2 configurations, "
                        "2026-01-01 00:00 to 2026-01-01 05:30 UTC")
    bare_line = next(x for x in lines if "│ bare" in x)
    assert "67 %" in bare_line and "14.0" in bare_line and "50 %" in bare_line
    assert "Detected: C/N >= 3 dB; listenable mono >= 12 dB, stereo >= 32 dB." in out
    assert "SNR" not in out and "no source" not in out  # the method only with --explain
    assert "Every sweep" not in out
    assert main(["history", "--db", str(db), "--station", "97.2", "--explain"]) == 0
    out = capsys.readouterr().out
    assert "some call it SNR" in out and "common practice, no source" in out and "no calibration given" in out


def test_one_configuration_with_detail(db, capsys):
    assert main(["history", "--db", str(db), "--station", "97.2", "--config", "preamp-a", "--detail"]) == 0
    out = capsys.readouterr().out
    assert "6 sweeps in 1 configuration," in out and "│ bare" not in out
    assert "listenable stereo" in out and "2026-01-01 02:30:00" in out and "12.5" in out


def test_csv_is_rounded_and_uses_the_words(db, capsys):
    assert main(["history", "--db", str(db), "--station", "97.2", "--csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert len(rows) == 12
    assert list(rows[0]) == ["configuration", "sweep_id", "started_utc", "freq_hz", "cn_db", "detected",
                             "listenable_mono", "listenable_stereo", "power_dbfs", "noise_dbfs"]
    first = rows[0]
    assert first["freq_hz"] == "97200000" and first["cn_db"] == "20.00" and first["listenable_mono"] == "true"
    assert rows[4]["cn_db"] == ""  # not measurable


def test_json_and_plot(db, tmp_path, capsys):
    png = tmp_path / "night.png"
    assert main(["history", "--db", str(db), "--station", "97.2", "--json", "--plot", str(png)]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["channel_hz"] == 97_200_000 and data["calibrated"] is False
    assert {"detected", "listenable_mono", "listenable_stereo"} <= set(data["sweeps"][0])
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 10_000


def test_errors_are_one_line(db, capsys, tmp_path):
    for args, text in (
        (["--station", "88.0"], "no station within 100 kHz of 88 MHz in the selected sweeps; nearest stations: "
                                "97.20 MHz"),
        (["--station", "97.31"], "no station within 100 kHz of 97.31 MHz"),
        (["--station", "97.2", "--config", "other"], "configuration 'other'"),
        (["--station", "97.2", "--plot", str(tmp_path / "x.jpg")], "must end in .png"),
    ):
        code = main(["history", "--db", str(db), *args])
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 1 and len(err) == 1 and err[0].startswith("Error: ") and text in err[0], err
    with pytest.raises(NoDataError, match="configurations present: bare, preamp-a"):
        station_history(db, 97.2e6, ["nothing"])


def test_calibrated_levels_in_csv_and_refused_at_another_gain(db, tmp_path, capsys):
    import generator_bench as bench

    from analysis.calibration import calibrate_from_generator, save_calibration

    gen = tmp_path / "gen.db"
    bench.record(gen, "bare", "generator", [(95.5e6, -75.0), (99.5e6, -75.0)], gain_db=29.7, seed=8)
    good = save_calibration(calibrate_from_generator(gen, "bare", level_dbm=-75.0), tmp_path / "good.json")
    assert main(["history", "--db", str(db), "--station", "97.2", "--csv", "--calibration", str(good)]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    points = [95.5e6, 99.5e6]
    offset = float(np.interp(97.2e6, points, bench.full_scale_dbm(points)))  # linear between the points
    assert float(rows[0]["power_dbm"]) == pytest.approx(float(rows[0]["power_dbfs"]) + offset, abs=0.05)
    assert float(rows[0]["power_dbuv"]) == pytest.approx(float(rows[0]["power_dbm"]) + 106.99, abs=0.011)

    bench.record(tmp_path / "gen40.db", "bare", "generator", [(97.5e6, -75.0)], gain_db=40.2)
    other = save_calibration(calibrate_from_generator(tmp_path / "gen40.db", "bare", level_dbm=-75.0),
                             tmp_path / "other.json")
    code = main(["history", "--db", str(db), "--station", "97.2", "--csv", "--calibration", str(other)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1
    assert "calibration was made at receiver gain 40.2 dB but these sweeps were taken at 29.7 dB" in err[0]


def test_the_station_is_the_census_station_off_the_raster(tmp_path):
    """A station between raster channels is one series at its own carrier, found from either side."""
    path = tmp_path / "off.db"
    carrier = 97_260_000.0
    cns = [18.0, 9.0, None]
    with SurveyStore(path) as store:
        run = store.begin_run(RunInfo("simulated", "test", "test", {}))
        for k, cn_db in enumerate(cns):
            t = f"2026-01-02T0{k}:00:00.000000Z"
            hop = HopReading(0, 97.6e6, 2.4e6, 240_000, 0.0, -113.0, t)
            channels = tuple(ChannelReading(f, 0, NOISE_DBFS, NOISE_DBFS, NOISE_DBFS - 53.0, None, False)
                             for f in FREQS)
            emissions = () if cn_db is None else (EmissionReading(
                carrier, 0, "fm", 150e3, NOISE_DBFS + 10 * math.log10(1 + 10 ** (cn_db / 10)), NOISE_DBFS, cn_db,
                None, False, 97_300_000),)
            store.write_sweep(run, SweepResult("bare", "antenna", t, t, SweepSettings(band="europe"), (hop,),
                                               channels, emissions=emissions))
        store.end_run(run)
    for asked in (97.2e6, 97.3e6):
        (series,) = station_history(path, asked).series
        assert series.freq_hz == pytest.approx(carrier)
        assert np.allclose(series.cn_db[:2], cns[:2], atol=1e-3) and series.detected.tolist() == [True, True, False]
        assert np.isnan(series.cn_db[2])  # no emission, and the raster channel has P = N: not measurable
    with pytest.raises(NoDataError, match=r"no station within 100 kHz of 97.4 MHz .*nearest stations: 97.26 MHz"):
        station_history(path, 97.4e6)
