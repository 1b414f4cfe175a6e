"""The station census end to end: stations table, schema-1 migration, census_matrix, the command
line, and the bundled demo scene against its truth (recordings_demo/quorrelby_hill.toml)."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from analysis.census import StationMatrix, census_matrix
from bandcensus.cli import main
from survey.bandplan import band_plan
from survey.records import RunInfo, SweepSettings
from survey.scene import load_scene, parse_scene
from survey.sources.recording import open_recording
from survey.sources.simulated import SimulatedSource
from survey.store import (SCHEMA_VERSION, SurveyStore, list_sweeps, open_for_reading, read_events,
                          read_station_rows)
from survey.sweep import plan_for_source, run_sweep

DEMO = Path(__file__).resolve().parents[1] / "recordings_demo"

_STATIONS = [(88.6, -88.0, True), (90.1, -95.0, False), (91.5, -101.0, True), (91.7, -80.0, True),
             (95.3, -92.0, True), (99.9, -97.0, False), (104.2, -86.0, True)]


def _scene():
    return parse_scene({
        "scene": {"name": "census-unit"},
        "outside_noise": {"environment": "rural"},
        "receiver": {"nf_db": 9.0, "full_scale_dbm": -57.0},
        "preamp": {"flat": {"gain_db": 10.0, "nf_db": 2.0, "circuits": [{"f0_hz": 97.0e6, "q": 3.0}]}},
        "station": [{"name": f"S{i}", "freq_mhz": f, "level_dbm": lvl, "stereo": st,
                     "fading": {"time_constant_s": 600.0, "spread_db": 0.0}}
                    for i, (f, lvl, st) in enumerate(_STATIONS)],
    })


SETTINGS = SweepSettings(band="europe", dwell_s=0.02)


def _sweep(cfg, seed):
    src = SimulatedSource(_scene(), cfg, seed=seed)
    plan = plan_for_source(band_plan("europe"), src, SETTINGS)
    return run_sweep(src, plan, SETTINGS, cfg, "antenna", keep_psd=True)


@pytest.fixture(scope="module")
def sweeps():
    return [_sweep(cfg, seed) for seed in (1, 2) for cfg in ("bare", "flat")]


@pytest.fixture()
def db(tmp_path, sweeps):
    path = tmp_path / "census.db"
    with SurveyStore(path) as store:
        run = store.begin_run(RunInfo("simulated", "unit", "test", {}))
        for result in sweeps:
            store.write_sweep(run, result, keep_spectra=True)
        store.end_run(run)
    return path


def test_each_transmitter_found_once_per_sweep_and_no_phantom(sweeps):
    truth = np.array([f * 1e6 for f, _, _ in _STATIONS])
    for result in sweeps:
        fm = [e for e in result.emissions if e.kind == "fm"]
        assert not [e for e in result.emissions if e.kind == "narrow"]
        nearest = np.array([np.min(np.abs(truth - e.freq_hz)) for e in fm])
        assert np.all(nearest < 25e3), [e.freq_hz for e in fm]  # no sideband or phantom
        found = [int(np.argmin(np.abs(truth - e.freq_hz))) for e in fm]
        assert len(found) == len(set(found))  # once each
        strong = {i for i, (_, lvl, _) in enumerate(_STATIONS) if lvl >= -97.0}
        assert strong <= set(found), (result.configuration, sorted(found))


def test_stations_rows_are_written_with_the_sweep(db, sweeps):
    conn = open_for_reading(db)
    rows = read_station_rows(conn, [s.id for s in list_sweeps(conn)])
    conn.close()
    assert len(rows) == sum(len(s.emissions) for s in sweeps)
    first = [r for r in rows if r.sweep_id == 1]
    for r, e in zip(first, sweeps[0].emissions):
        assert r.freq_hz == pytest.approx(e.freq_hz)
        assert r.cn_db == pytest.approx(e.cn_db)
        assert (r.kind, r.stereo, r.channel_freq_hz, r.separable) == (e.kind, e.stereo, e.channel_freq_hz, e.separable)


def test_census_matrix_columns_are_stations_rows_are_sweeps(db):
    conn = open_for_reading(db)
    rows = list_sweeps(conn)
    m = census_matrix(conn, rows)
    base = m.rows([r.id for r in rows if r.configuration == "bare"])
    conn.close()
    assert isinstance(m, StationMatrix)
    assert m.power_dbfs.shape == (4, m.n_stations)
    truth = np.array([f * 1e6 for f, _, _ in _STATIONS])
    assert m.n_stations == len(set(int(np.argmin(np.abs(truth - f))) for f in m.freqs_hz))
    assert np.all(np.min(np.abs(truth[:, None] - m.freqs_hz[None, :]), axis=0) < 25e3)
    assert set(m.kinds) == {"fm"}
    assert base.sweep_ids.tolist() == [1, 3] and base.cn_db.shape == (2, m.n_stations)
    assert np.all(np.isfinite(m.power_dbfs))  # missed sweeps filled from the raster channel
    strong = int(np.argmin(np.abs(m.freqs_hz - 91.7e6)))
    assert m.detected[:, strong].all() and (m.cn_db[:, strong] > 20).all()


def test_weak_station_beside_a_strong_one_keeps_its_own_cn(sweeps):
    # 91.5 MHz at -101 dBm sits 200 kHz below a -80 dBm station: the raster channel reads the
    # neighbour's skirt; the emission reading must agree with the station rendered alone.
    src = SimulatedSource(parse_scene({
        "scene": {"name": "alone"}, "outside_noise": {"environment": "rural"},
        "receiver": {"nf_db": 9.0, "full_scale_dbm": -57.0},
        "station": [{"name": "W", "freq_mhz": 91.5, "level_dbm": -101.0,
                     "fading": {"time_constant_s": 600.0, "spread_db": 0.0}}],
    }), "bare", seed=1)
    result = sweeps[0]
    (weak,) = [e for e in result.emissions if abs(e.freq_hz - 91.5e6) < 25e3]
    center = next(h.center_hz for h in result.hops if h.index == weak.hop_index)
    (t,) = src.truth(center, [91_500_000], 200e3, at_s=0.0)
    assert weak.cn_db == pytest.approx(t.cn_db, abs=1.0)
    assert weak.separable


def test_stations_command_json_and_blocks_per_configuration(db, capsys):
    assert main(["stations", "--db", str(db), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)["stations"]
    assert {r["configuration"] for r in out} == {"bare", "flat"}
    keys = {"freq_hz", "kind", "cn_db", "ci_db", "power_dbfs", "noise_dbfs", "occupied_bw_hz", "stereo",
            "heard_sweeps", "sweeps", "configuration", "input"}
    assert all(keys <= set(r) for r in out)
    bare = [r for r in out if r["configuration"] == "bare"]
    assert all(r["sweeps"] == 2 for r in bare)
    strong = min(bare, key=lambda r: abs(r["freq_hz"] - 91.7e6))
    assert strong["heard_sweeps"] == 2 and strong["stereo"] is True and strong["kind"] == "fm"
    mono = min(bare, key=lambda r: abs(r["freq_hz"] - 90.1e6))
    assert mono["stereo"] is False
    assert main(["stations", "--db", str(db), "--config", "flat", "--csv"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0].startswith("configuration,input,freq_hz")
    assert all(line.startswith("flat,antenna,") for line in lines[1:])
    assert main(["stations", "--db", str(db)]) == 0
    text = capsys.readouterr().out
    assert "Stations of bare" in text and "Stations of flat" in text


def test_stations_command_errors_are_one_line(tmp_path, db, capsys):
    assert main(["stations", "--db", str(tmp_path / "missing.db")]) == 1
    assert capsys.readouterr().err.startswith("Error: ")
    assert main(["stations", "--db", str(db), "--config", "nonesuch"]) == 1
    # one line naming the unknown label and every configuration the database holds
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("Error: ") and "'nonesuch'" in err[0]
    assert "the database holds: 'bare' antenna (2), 'flat' antenna (2)" in err[0]


# ---- schema 1 databases -------------------------------------------------------------------------

#: The schema-1 tables as version 1 of the tool created them (frozen copy: the fixture must not
#: follow later schema edits).
_V1_SQL = """
CREATE TABLE runs (id INTEGER PRIMARY KEY, started_utc TEXT NOT NULL, ended_utc TEXT,
  status TEXT NOT NULL DEFAULT 'running', tool_version TEXT NOT NULL, source_kind TEXT NOT NULL,
  device TEXT NOT NULL, settings TEXT NOT NULL, seed INTEGER, notes TEXT NOT NULL DEFAULT '') STRICT;
CREATE TABLE sweeps (id INTEGER PRIMARY KEY, run_id INTEGER NOT NULL REFERENCES runs(id),
  sequence INTEGER NOT NULL, configuration TEXT NOT NULL, input TEXT NOT NULL, started_utc TEXT NOT NULL,
  ended_utc TEXT NOT NULL, complete INTEGER NOT NULL, band TEXT NOT NULL, channel_bw_hz REAL NOT NULL,
  sample_rate_hz REAL NOT NULL, gain_db REAL, dwell_s REAL NOT NULL, settle_s REAL NOT NULL,
  fft_size INTEGER NOT NULL, usable_fraction REAL NOT NULL, dc_guard_hz REAL NOT NULL, ppm INTEGER NOT NULL,
  received_margin_db REAL NOT NULL, recording TEXT, notes TEXT NOT NULL DEFAULT '') STRICT;
CREATE INDEX sweeps_by_label ON sweeps(configuration, input, started_utc);
CREATE TABLE hops (sweep_id INTEGER NOT NULL REFERENCES sweeps(id), hop_index INTEGER NOT NULL,
  center_hz REAL NOT NULL, sample_rate_hz REAL NOT NULL, n_samples INTEGER NOT NULL, clip_fraction REAL,
  floor_dbfs_hz REAL NOT NULL, started_utc TEXT NOT NULL, PRIMARY KEY (sweep_id, hop_index)) STRICT;
CREATE TABLE channels (sweep_id INTEGER NOT NULL REFERENCES sweeps(id), freq_hz INTEGER NOT NULL,
  hop_index INTEGER NOT NULL, power_dbfs REAL NOT NULL, noise_dbfs REAL NOT NULL,
  noise_density_dbfs_hz REAL NOT NULL, cn_db REAL, received INTEGER NOT NULL,
  PRIMARY KEY (sweep_id, freq_hz)) STRICT;
CREATE TABLE channel_vectors (sweep_id INTEGER PRIMARY KEY REFERENCES sweeps(id), n_channels INTEGER NOT NULL,
  freqs_hz BLOB NOT NULL, power_dbfs BLOB NOT NULL, noise_dbfs BLOB NOT NULL, received BLOB NOT NULL) STRICT;
CREATE TABLE spectra (sweep_id INTEGER NOT NULL REFERENCES sweeps(id), hop_index INTEGER NOT NULL,
  f_start_hz REAL NOT NULL, bin_hz REAL NOT NULL, n_bins INTEGER NOT NULL, psd_centi_dbfs_hz BLOB NOT NULL,
  PRIMARY KEY (sweep_id, hop_index)) STRICT;
CREATE TABLE events (id INTEGER PRIMARY KEY, run_id INTEGER REFERENCES runs(id), sweep_id INTEGER,
  utc TEXT NOT NULL, kind TEXT NOT NULL, message TEXT NOT NULL) STRICT
"""


def _v1_database(path: Path, results) -> None:
    """A schema-1 database holding ``results``: the first with kept spectra, the rest without."""
    conn = sqlite3.connect(path, isolation_level=None)
    for statement in _V1_SQL.split(";"):
        conn.execute(statement)
    conn.execute("INSERT INTO runs (id, started_utc, tool_version, source_kind, device, settings)"
                 " VALUES (1, '2026-01-01T00:00:00.000000Z', '0.1', 'simulated', 'unit', '{}')")
    for sid, r in enumerate(results, start=1):
        s = r.settings
        conn.execute("INSERT INTO sweeps VALUES (?,1,?,?,?,?,?,1,?,?,?,NULL,?,?,?,?,?,0,?,NULL,'')",
                     (sid, sid - 1, r.configuration, r.input, r.started_utc, r.ended_utc, s.band,
                      s.channel_bw_hz, s.sample_rate_hz, s.dwell_s, s.settle_s, s.fft_size,
                      s.usable_fraction, s.dc_guard_hz, s.received_margin_db))
        for h in r.hops:
            conn.execute("INSERT INTO hops VALUES (?,?,?,?,?,?,?,?)", (sid, h.index, h.center_hz,
                         h.sample_rate_hz, h.n_samples, h.clip_fraction, h.floor_dbfs_hz, h.started_utc))
            if sid == 1:
                centi = np.round(np.asarray(h.psd_dbfs_hz, np.float64) * 100).astype("<i2")
                conn.execute("INSERT INTO spectra VALUES (?,?,?,?,?,?)", (sid, h.index, float(h.psd_freqs_hz[0]),
                             float(h.psd_freqs_hz[1] - h.psd_freqs_hz[0]), centi.size, centi.tobytes()))
        rows = sorted(r.channels, key=lambda c: c.freq_hz)
        conn.executemany("INSERT INTO channels VALUES (?,?,?,?,?,?,?,?)", [
            (sid, c.freq_hz, c.hop_index, c.power_dbfs, c.noise_dbfs, c.noise_density_dbfs_hz, c.cn_db,
             int(c.received)) for c in rows])
        conn.execute("INSERT INTO channel_vectors VALUES (?,?,?,?,?,?)", (
            sid, len(rows), np.asarray([c.freq_hz for c in rows], "<i8").tobytes(),
            np.asarray([c.power_dbfs for c in rows], "<f4").tobytes(),
            np.asarray([c.noise_dbfs for c in rows], "<f4").tobytes(),
            np.asarray([c.received for c in rows], np.uint8).tobytes()))
    conn.execute("PRAGMA user_version = 1")
    conn.close()


def test_a_schema_1_database_migrates_and_rebuilds_station_rows(tmp_path, sweeps):
    path = tmp_path / "v1.db"
    _v1_database(path, sweeps[:2])
    with SurveyStore(path) as store:
        assert store.schema_version == SCHEMA_VERSION == 3
        notes = store.migration_notes
    assert len(notes) == 1 and "(ids 2)" in notes[0] and "without spectra" in notes[0]
    conn = open_for_reading(path)
    rebuilt = read_station_rows(conn, [1, 2])
    events = [e["message"] for e in read_events(conn) if e["kind"] == "migration"]
    conn.close()
    assert not [r for r in rebuilt if r.sweep_id == 2]
    assert any("rebuilt" in m for m in events) and any("could not be rebuilt" in m for m in events)
    live = sweeps[0].emissions
    assert len(rebuilt) == len(live)
    for r, e in zip(rebuilt, live):  # stored PSD is rounded to 0.01 dB
        assert r.freq_hz == pytest.approx(e.freq_hz, abs=2e3)
        assert r.cn_db == pytest.approx(e.cn_db, abs=0.3)
        assert r.kind == e.kind and r.stereo is False  # no samples, no pilot test
        assert (r.rds_pi, r.rds_ps, r.rds_pty, r.rds_blocks, r.rds_block_errors) == (None, None, None, 0, 0)


def test_stations_command_migrates_a_schema_1_database_and_says_what_it_could_not(tmp_path, sweeps, capsys):
    path = tmp_path / "v1.db"
    _v1_database(path, sweeps[:2])
    assert main(["stations", "--db", str(path), "--json"]) == 0
    captured = capsys.readouterr()
    assert "could not be rebuilt" in captured.err
    stations = json.loads(captured.out)["stations"]
    assert stations and all(s["rds_pi"] is None and s["rds_ps"] is None for s in stations)


# ---- the demo scene --------------------------------------------------------------------------------

def test_demo_stations_found_once_and_carriers_never_stations():
    scene = load_scene(DEMO / "quorrelby_hill.toml")
    truth = np.array(sorted(s.freq_hz for s in scene.stations))
    metas = sorted((DEMO / "sigmf").glob("*_bare_antenna.sigmf-meta"))[:2] + \
        sorted((DEMO / "sigmf").glob("*_preamp-staggered_antenna.sigmf-meta"))[:1]
    settings = SweepSettings(band="europe")
    for meta in metas:
        src = open_recording(meta)
        plan = plan_for_source(band_plan("europe"), src, settings)
        result = run_sweep(src, plan, settings, "demo", "antenna")
        assert all(e.kind == "fm" for e in result.emissions), [(e.freq_hz, e.kind) for e in result.emissions]
        idx = [int(np.argmin(np.abs(truth - e.freq_hz))) for e in result.emissions]
        assert all(abs(truth[i] - e.freq_hz) < 25e3 for i, e in zip(idx, result.emissions))
        assert len(idx) == len(set(idx))  # each station once
        detected = {i for i, e in zip(idx, result.emissions) if e.cn_db >= settings.received_margin_db}
        # every station but the weak one at 94.5 MHz (below the margin without a preamp)
        assert detected >= set(range(truth.size)) - {int(np.argmin(np.abs(truth - 94.5e6)))}


def test_analyses_on_a_schema_1_database_say_once_how_to_migrate(tmp_path, sweeps, capsys):
    """The analyses open a database read-only: a schema-1 database (no stations table) is never
    migrated behind the user's back; every command built on the census says so in one line and
    the database is left as it was. Raster channels (--channels) need no census."""
    path = tmp_path / "v1.db"
    _v1_database(path, sweeps)
    before = path.read_bytes()
    for argv in (["compare", "--base", "bare", "--test", "flat"],
                 ["compare", "--base", "bare", "--test", "flat", "--json"],
                 ["report", "--base", "bare", "--test", "flat", "--out", str(tmp_path / "r.html")]):
        code = main([argv[0], "--db", str(path), *argv[1:]])
        captured = capsys.readouterr()
        err = captured.err.strip().splitlines()
        assert code == 1 and len(err) == 1, (argv, captured.err)
        assert err[0] == (f"Error: {path} predates the station census (schema 1): run `bandcensus stations --db "
                          f"{path}` once to migrate it (`compare --channels` reads the raster channels without it)")
    assert path.read_bytes() == before and not (tmp_path / "r.html").exists()
    # the chain diagnosis reads raster channels and spectra only: it runs on a schema-1 database
    assert main(["diagnose", "--db", str(path), "--base", "bare", "--test", "flat"]) == 0
    capsys.readouterr()
    assert main(["compare", "--db", str(path), "--base", "bare", "--test", "flat", "--channels", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["unit"] == "channel"
    # the command named in the message migrates it; then the analyses run on stations
    assert main(["stations", "--db", str(path), "--json"]) == 0
    capsys.readouterr()
    assert main(["compare", "--db", str(path), "--base", "bare", "--test", "flat", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["unit"] == "station"
