"""Station identity from RDS through the survey, the store and the census.

Hops are rendered by the seeded fixtures of ``tests/rds_fixtures.py``: one FM station sending RDS
(PI E3D2, PS "HILLTOP", PTY 10; invented) and one sending none, each at 30 dB C/N, measured by
:func:`survey.dsp.measure_hop` exactly as a sweep measures them. The decision rules checked (a PI
only when confirmed, PS characters only from fully checked groups, segments accumulated across
sweeps only under the confirmed PI) are those of IEC 62106 block checking as implemented in
:mod:`survey.rds.identity`.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from analysis.census import census_matrix, display_name, station_census
from bandcensus.cli import main
from rds_fixtures import FS, PROGRAMME, station_iq
from survey import dsp
from survey.rds import merge_rds
from survey.rds.identity import RdsIdentity, RdsResult
from survey.records import EmissionReading, IQBlock, RunInfo, SweepResult, SweepSettings
from survey.store import SurveyStore, list_sweeps, open_for_reading, read_station_rows

CENTER_HZ = 100_000_000.0
RDS_HZ = 100_300_000      # the station sending RDS (+300 kHz from the hop centre)
PLAIN_HZ = 99_700_000     # the station sending none (-300 kHz)
SETTINGS = SweepSettings(band="test", sample_rate_hz=FS, usable_fraction=0.9, fft_size=1024)
TRUE_PS = PROGRAMME.ps.ljust(8)


def _sweep(k: int, dwell_s: float, settings: SweepSettings = SETTINGS) -> SweepResult:
    """One single-hop sweep (seed ``k``) of the two stations, measured as a survey measures it."""
    z = station_iq(7000 + k, 30.0, dwell_s, offset_hz=RDS_HZ - CENTER_HZ) + \
        station_iq(8000 + k, 30.0, dwell_s, programme=None, offset_hz=PLAIN_HZ - CENTER_HZ)
    t = f"2026-06-01T20:{k // 60:02d}:{k % 60:02d}.000000Z"
    block = IQBlock(CENTER_HZ, FS, "cf32_le", z.astype(np.complex64).view(np.float32), t)
    emissions: list = []
    hop, channels = dsp.measure_hop(block, [PLAIN_HZ, RDS_HZ], settings, 0, emissions_out=emissions)
    return SweepResult("bare", "antenna", t, t, settings, (hop,), tuple(channels), emissions=tuple(emissions))


def _database(path, results) -> None:
    with SurveyStore(path) as store:
        run = store.begin_run(RunInfo("simulated", "unit", "test", {}))
        for r in results:
            store.write_sweep(run, r)
        store.end_run(run)


def _column(matrix, freq_hz: float) -> int:
    j = int(np.argmin(np.abs(matrix.freqs_hz - freq_hz)))
    assert abs(matrix.freqs_hz[j] - freq_hz) < 10e3
    return j


@pytest.fixture(scope="module")
def short_sweeps():
    """40 sweeps of 100 ms hops: about 118 RDS bits each, a PS segment only now and then."""
    return [_sweep(k, 0.1) for k in range(40)]


@pytest.fixture(scope="module")
def long_sweep():
    """One sweep of a 450 ms hop: enough for the whole PS name (four groups 0A, 0.35 s, plus alignment)."""
    return _sweep(100, 0.45)


def test_station_rows_round_trip_the_rds_columns(tmp_path):
    e = dict(hop_index=0, kind="fm", occupied_bw_hz=110e3, power_dbfs=-20.0, noise_dbfs=-45.0, cn_db=25.0,
             ci_db=None, stereo=True)
    named = EmissionReading(freq_hz=RDS_HZ, channel_freq_hz=RDS_HZ, rds_pi=0xE3D2, rds_ps="__LL____", rds_pty=10,
                            rds_blocks=7, rds_block_errors=2, **e)
    bare = EmissionReading(freq_hz=PLAIN_HZ, channel_freq_hz=PLAIN_HZ, **e)
    t = "2026-06-01T20:00:00.000000Z"
    _database(tmp_path / "s.db", [SweepResult("bare", "antenna", t, t, SETTINGS, (), (), emissions=(named, bare))])
    conn = open_for_reading(tmp_path / "s.db")
    rows = read_station_rows(conn, [1])
    conn.close()
    got = {r.freq_hz: (r.rds_pi, r.rds_ps, r.rds_pty, r.rds_blocks, r.rds_block_errors) for r in rows}
    assert got == {float(RDS_HZ): (0xE3D2, "__LL____", 10, 7, 2), float(PLAIN_HZ): (None, None, None, 0, 0)}


def test_measure_hop_reads_rds_only_when_asked_and_only_from_the_station_sending_it(long_sweep):
    by_freq = {round(e.freq_hz, -4): e for e in long_sweep.emissions}
    named, plain = by_freq[RDS_HZ], by_freq[PLAIN_HZ]
    assert named.rds_pi == PROGRAMME.pi and named.rds_ps == TRUE_PS and named.rds_pty == PROGRAMME.pty
    assert named.rds_blocks >= 16  # 0.45 s holds 20 blocks; at 30 dB none fails
    assert plain.rds_pi is None and plain.rds_ps is None
    off = _sweep(100, 0.45, SweepSettings(**{**SETTINGS.__dict__, "decode_rds": False}))
    assert all(e.rds_blocks == 0 and e.rds_pi is None for e in off.emissions)


def test_a_whole_name_from_one_450_ms_sweep(tmp_path, long_sweep):
    _database(tmp_path / "s.db", [long_sweep])
    conn = open_for_reading(tmp_path / "s.db")
    m = census_matrix(conn, list_sweeps(conn))
    conn.close()
    j, p = _column(m, RDS_HZ), _column(m, PLAIN_HZ)
    assert m.names[j] == "HILLTOP (PI E3D2)"
    assert m.names[p] is None and m.identities[p].pi is None
    assert m.rds_blocks[0, j] >= 16 and m.rds_blocks[0, p] == 0


def test_names_build_up_over_100_ms_sweeps_and_are_never_wrong(tmp_path, short_sweeps):
    _database(tmp_path / "s.db", short_sweeps)
    conn = open_for_reading(tmp_path / "s.db")
    sweeps = list_sweeps(conn)
    m = census_matrix(conn, sweeps)
    rows = read_station_rows(conn, [s.id for s in sweeps])
    conn.close()
    j, p = _column(m, RDS_HZ), _column(m, PLAIN_HZ)
    ident = m.identities[j]
    assert ident.pi == PROGRAMME.pi and ident.conflicts == 0
    known = [(k, c) for k, c in enumerate(ident.ps_partial) if c != "_"]
    assert all(TRUE_PS[k] == c for k, c in known)  # never a wrong character
    single = max(sum(c != "_" for c in (r.rds_ps or "")) for r in rows if abs(r.freq_hz - RDS_HZ) < 10e3)
    assert single <= 4 < len(known)  # one 100 ms hop holds at most one group: the name needs several
    assert m.names[j] in ("PI E3D2", "HILLTOP (PI E3D2)")
    # the station without RDS: no code in any of the 40 sweeps, no name
    assert all(r.rds_pi is None and r.rds_ps is None for r in rows if abs(r.freq_hz - PLAIN_HZ) < 10e3)
    assert m.identities[p].pi is None and m.names[p] is None
    assert m.rds_blocks.shape == (40, m.n_stations) and m.rds_blocks[:, j].sum() > 100
    # a few sweeps name it by PI only; the per-sweep counts follow the sweeps asked for
    sub = m.rows([s.id for s in sweeps[:3]])
    assert sub.rds_blocks.shape == (3, m.n_stations) and sub.names == m.names


def test_segments_accumulate_only_under_the_confirmed_pi():
    right = [RdsResult(0xE3D2, ((0, "HI"),), 10, 4, 0), RdsResult(0xE3D2, ((1, "LL"),), 10, 4, 0),
             RdsResult(None, ((2, "TO"),), None, 3, 1)]
    other = RdsResult(0x1234, ((2, "XX"), (3, "YY")), 3, 4, 0)
    ident = merge_rds([*right, other])
    assert ident.pi == 0xE3D2 and ident.ps_partial == "HILL____" and ident.conflicts == 1
    assert display_name(ident) == "PI E3D2"
    assert display_name(ident, "Ridge relay") == "Ridge relay (PI E3D2)"
    whole = RdsIdentity(0xE3D2, ((0, "HI"), (1, "LL"), (2, "TO"), (3, "P ")), 10, 1, 1, 0, 4, 0)
    assert display_name(whole, "Ridge relay") == "HILLTOP (PI E3D2)"  # an RDS name always wins
    assert display_name(None, "Ridge relay") == "Ridge relay" and display_name(None) is None


def test_stations_command_json_csv_and_names_file(tmp_path, long_sweep, capsys):
    db = tmp_path / "s.db"
    _database(db, [long_sweep])
    names = tmp_path / "names.csv"
    names.write_text("freq_mhz,name\n# invented names\n99.7,Plain Relay\n100.3,Not This One\n", encoding="utf-8")
    assert main(["stations", "--db", str(db), "--json", "--names", str(names)]) == 0
    stations = json.loads(capsys.readouterr().out)["stations"]
    by = {round(s["freq_hz"], -4): s for s in stations}
    named, plain = by[RDS_HZ], by[PLAIN_HZ]
    assert {"rds_pi", "rds_ps", "rds_pty", "rds_block_error_rate"} <= set(named)
    assert (named["rds_pi"], named["rds_ps"], named["rds_pty"]) == ("E3D2", TRUE_PS, PROGRAMME.pty)
    assert 0.0 <= named["rds_block_error_rate"] < 0.2
    assert named["name"] == "HILLTOP (PI E3D2)"
    assert (plain["rds_pi"], plain["rds_ps"], plain["rds_pty"], plain["rds_block_error_rate"]) == (None,) * 4
    assert plain["name"] == "Plain Relay"
    assert main(["stations", "--db", str(db), "--csv"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert "rds_pi,rds_ps,rds_pty,rds_block_error_rate" in lines[0]
    assert any(",E3D2,HILLTOP ," in line for line in lines[1:])
    assert main(["stations", "--db", str(db)]) == 0
    text = capsys.readouterr().out
    assert "E3D2" in text and "HILLTOP" in text
    names.write_text("freq_mhz,name\nninety,Bad\n", encoding="utf-8")
    assert main(["stations", "--db", str(db), "--names", str(names)]) == 1
    assert capsys.readouterr().err.startswith("Error: ")


def test_station_census_takes_user_names(tmp_path, long_sweep):
    _database(tmp_path / "s.db", [long_sweep])
    summaries, _ = station_census(tmp_path / "s.db", names={PLAIN_HZ: "Plain Relay"})
    by = {round(s.freq_hz, -4): s for s in summaries}
    assert by[PLAIN_HZ].name == "Plain Relay" and by[PLAIN_HZ].rds_pi is None
    assert by[RDS_HZ].rds_pi == PROGRAMME.pi and by[RDS_HZ].rds_ps == TRUE_PS


def test_a_schema_2_table_without_the_rds_columns_reads_and_gains_them(tmp_path, long_sweep):
    import sqlite3

    db = tmp_path / "early.db"
    _database(db, [long_sweep])
    conn = sqlite3.connect(db)
    conn.execute("DROP INDEX stations_identified")  # back to schema 2 as first written
    conn.execute("DROP TABLE station_vectors")
    conn.execute("PRAGMA user_version = 2")
    for name in ("rds_pi", "rds_ps", "rds_pty", "rds_blocks", "rds_block_errors"):
        conn.execute(f"ALTER TABLE stations DROP COLUMN {name}")
    conn.commit()
    conn.close()
    conn = open_for_reading(db)
    rows = read_station_rows(conn, [1])
    conn.close()
    assert rows and all((r.rds_pi, r.rds_blocks) == (None, 0) for r in rows)
    _database(db, [long_sweep])  # opening for writing adds the columns; the new sweep keeps its RDS
    conn = open_for_reading(db)
    rows = read_station_rows(conn, [1, 2])
    conn.close()
    assert {r.rds_pi for r in rows if r.sweep_id == 2} == {PROGRAMME.pi, None}
    assert all(r.rds_pi is None for r in rows if r.sweep_id == 1)
