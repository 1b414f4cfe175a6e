"""Absolute levels from a generator of known level, checked against a second known level.

Check values: dBuV = dBm + 10 log10(50) + 90 from P = V^2/R (derived; the trade's rounded
"dBm + 107"); k T0 = -173.975 dBm/Hz (k exact, SI Brochure 9th ed.; T0 = 290 K, IEEE Std 161).
"""

import json
import math

import numpy as np
import pytest

from analysis.calibration import (
    DBUV_MINUS_DBM_50_OHM,
    KT0_DBM_HZ,
    add_absolute_levels,
    calibrate_from_generator,
    dbm_to_dbuv,
    dbuv_to_dbm,
    load_calibration,
    read_levels_csv,
    save_calibration,
)
from analysis.errors import BadParameterError, MismatchError, NoDataError
from survey.sources.simulated import quantisation_density_fs2_hz
from survey.store import list_sweeps, open_for_reading, read_channel_matrix
from survey.units import BOLTZMANN_J_PER_K
import generator_bench as bench

# a generator stepped every 2 MHz: linear interpolation of the bench's 1.5 dB ripple (40 MHz period)
# between points is then good to about 0.02 dB
CAL_TONES_HZ = [88.5e6 + 2e6 * k for k in range(10)] + [107.5e6]


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = tmp_path_factory.mktemp("cal") / "bench.db"
    bench.record(path, "bare", "generator", [(f, -75.0) for f in CAL_TONES_HZ], seed=10)
    return path


def _tone_dbfs(db_path, sweep_id, freq_hz):
    conn = open_for_reading(db_path)
    try:
        m = read_channel_matrix(conn, [sweep_id])
    finally:
        conn.close()
    col = int(np.argmin(np.abs(m.freqs_hz - freq_hz)))
    p, n = 10 ** (m.power_dbfs[0, col] / 10.0), 10 ** (m.noise_dbfs[0, col] / 10.0)
    return 10 * math.log10(p - n), m


def test_dbuv_conversion_from_ohms_law():
    # 1 mW into 50 ohm: V = sqrt(P R) = 0.2236 V = 223 607 uV -> 106.99 dBuV
    volts = math.sqrt(1e-3 * 50.0)
    assert float(dbm_to_dbuv(0.0)) == pytest.approx(20 * math.log10(volts / 1e-6), abs=1e-9)
    assert DBUV_MINUS_DBM_50_OHM == pytest.approx(106.99, abs=0.005)
    assert round(DBUV_MINUS_DBM_50_OHM) == 107
    assert float(dbuv_to_dbm(dbm_to_dbuv(-93.2))) == pytest.approx(-93.2)
    assert KT0_DBM_HZ == pytest.approx(-173.975, abs=0.001)


def test_a_second_known_level_reads_within_a_tenth_of_a_db(db, tmp_path):
    cal = calibrate_from_generator(db, "bare", level_dbm=-75.0)
    assert [round(p.freq_hz) for p in cal.points] == [round(f) for f in CAL_TONES_HZ]
    assert cal.gain_db == bench.RECEIVER_GAIN_DB
    # the offset follows the receiver's full-scale level at each point
    for p in cal.points:
        assert p.offset_db == pytest.approx(float(bench.full_scale_dbm(p.freq_hz)), abs=0.05)
    # a second generator level, between calibration points, 15 dB lower
    other = tmp_path / "second.db"
    for f_hz in (90.3e6, 98.7e6, 106.1e6):
        (sid,) = bench.record(other, "bare", "generator", [(f_hz, -90.0)], seed=int(f_hz) % 97)
        tone, _ = _tone_dbfs(other, sid, f_hz)
        assert float(cal.to_dbm(tone, f_hz, bench.RECEIVER_GAIN_DB)) == pytest.approx(-90.0, abs=0.1)


def test_noise_density_beside_kt0(db, tmp_path):
    # terminated input: density at the receiver input is k (T_term + T_rx) plus the 8-bit
    # quantisation noise referred to the input (uniform model, 2 LSB^2/12 over fs)
    cal = calibrate_from_generator(db, "bare", level_dbm=-75.0)
    (sid,) = bench.record(tmp_path / "term.db", "bare", "terminated", [(None, 0.0)], seed=3)
    conn = open_for_reading(tmp_path / "term.db")
    try:
        rows = conn.execute("SELECT freq_hz, noise_density_dbfs_hz FROM channels WHERE sweep_id=?", (sid,)).fetchall()
    finally:
        conn.close()
    got = add_absolute_levels([{"freq_hz": f, "noise_density_dbfs_hz": d} for f, d in rows], cal,
                              bench.RECEIVER_GAIN_DB)
    f = np.array([r["freq_hz"] for r in got], float)
    quant_mw_hz = quantisation_density_fs2_hz(bench.SAMPLE_RATE_HZ) * 10 ** (bench.full_scale_dbm(f) / 10.0)
    thermal_mw_hz = BOLTZMANN_J_PER_K * (bench.TERMINATION_K + bench.RECEIVER_NOISE_K) * 1e3
    expected = 10 * np.log10(thermal_mw_hz + quant_mw_hz)
    measured = np.array([r["noise_density_dbm_hz"] for r in got])
    assert np.median(measured - expected) == pytest.approx(0.0, abs=0.2)
    above = np.array([r["noise_density_above_kt0_db"] for r in got])
    assert np.allclose(above, measured - (-173.975), atol=0.001)


def test_levels_file_with_uneven_generator_output(tmp_path):
    levels = {88.5e6: -74.0, 95.5e6: -76.5, 101.5e6: -75.2, 107.5e6: -73.1}
    path = tmp_path / "uneven.db"
    bench.record(path, "bare", "generator", list(levels.items()), seed=21)
    csv_path = tmp_path / "levels.csv"
    csv_path.write_text("freq_mhz,level_dbm\n" + "".join(f"{f / 1e6:g},{v:g}\n" for f, v in levels.items()))
    cal = calibrate_from_generator(path, "bare", levels=read_levels_csv(csv_path))
    for p in cal.points:
        assert p.offset_db == pytest.approx(float(bench.full_scale_dbm(p.freq_hz)), abs=0.05)
    # with one constant level instead, the uneven output would read wrong by its unevenness
    flat = calibrate_from_generator(path, "bare", level_dbm=-75.0)
    assert flat.offset_db_at(95.5e6) - cal.offset_db_at(95.5e6) == pytest.approx(1.5, abs=0.05)


def test_refuses_another_receiver_gain(db):
    cal = calibrate_from_generator(db, "bare", level_dbm=-75.0)
    with pytest.raises(MismatchError, match=r"receiver gain 40.2 dB but these sweeps were taken at 29.7 dB"):
        cal.to_dbm(-40.0, 98e6, 29.7)
    with pytest.raises(MismatchError, match="automatic/unrecorded"):
        add_absolute_levels([{"freq_hz": 98e6, "power_dbfs": -40.0}], cal, None)


def test_absolute_columns_and_holding_outside_the_points(db):
    cal = calibrate_from_generator(db, "bare", level_dbm=-75.0)
    (row,) = add_absolute_levels([{"freq_hz": 98_000_000, "power_dbfs": -40.0, "noise_dbfs": None}], cal,
                                 bench.RECEIVER_GAIN_DB)
    assert row["power_dbm"] == pytest.approx(-40.0 + cal.offset_db_at(98e6))
    assert row["power_dbuv"] == pytest.approx(row["power_dbm"] + 106.99, abs=0.005)
    assert row["noise_dbm"] is None and row["calibrated"] is True
    assert cal.covers(88.0e6) is False
    assert cal.offset_db_at(88.0e6) == pytest.approx(cal.points[0].offset_db)


def test_file_round_trip_and_damaged_files(db, tmp_path):
    cal = calibrate_from_generator(db, "bare", level_dbm=-75.0)
    path = save_calibration(cal, tmp_path / "cal.json")
    assert load_calibration(path) == cal
    data = json.loads(path.read_text())
    assert data["format"] == "bandcensus-calibration" and "dBFS + offset_db" in data["conversion"]
    (tmp_path / "bad.json").write_text("{}")
    with pytest.raises(BadParameterError, match="not a bandcensus calibration file"):
        load_calibration(tmp_path / "bad.json")
    (tmp_path / "junk.json").write_text("nope")
    with pytest.raises(BadParameterError, match="not JSON"):
        load_calibration(tmp_path / "junk.json")


def test_errors_name_the_remedy(db, tmp_path):
    with pytest.raises(NoDataError, match="no complete generator sweeps of configuration 'preamp'.*bare"):
        calibrate_from_generator(db, "preamp", level_dbm=-75.0)
    with pytest.raises(BadParameterError, match="not both"):
        calibrate_from_generator(db, "bare")
    mixed = tmp_path / "mixed.db"
    bench.record(mixed, "bare", "generator", [(92.5e6, -75.0)], gain_db=40.2)
    bench.record(mixed, "bare", "generator", [(96.5e6, -75.0)], gain_db=29.7)
    with pytest.raises(MismatchError, match="one fixed gain"):
        calibrate_from_generator(mixed, "bare", level_dbm=-75.0)
    loud = tmp_path / "loud.db"
    bench.record(loud, "bare", "generator", [(96.5e6, -55.0)])
    with pytest.raises(BadParameterError, match="too high.*lower it by 10 dB"):
        calibrate_from_generator(loud, "bare", level_dbm=-55.0)
    bad_csv = tmp_path / "levels.csv"
    bad_csv.write_text("freq_mhz,level_dbm\n96.5,-75\n97.0,abc\n")
    with pytest.raises(BadParameterError, match="line 3"):
        read_levels_csv(bad_csv)
    bad_csv.write_text("mhz,dbm\n96.5,-75\n")
    with pytest.raises(BadParameterError, match="header line 'freq_mhz,level_dbm'"):
        read_levels_csv(bad_csv)
    far = tmp_path / "far.csv"
    far.write_text("freq_mhz,level_dbm\n120,-75\n")
    with pytest.raises(NoDataError, match="no channel was measured near 120 MHz"):
        calibrate_from_generator(db, "bare", levels=read_levels_csv(far))
