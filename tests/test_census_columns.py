"""The columnar copy of the station rows and the census computed on it.

``station_vectors`` must read back exactly what ``stations`` holds (every column, the same order),
whether a sweep has its columnar copy or not; the vectorised census must give exactly what the
census computed row by row gave (the reference below is that row-by-row census, kept here as the
definition: single linkage along frequency per kind, median carrier, most common raster channel,
the strongest emission of a station per sweep); a database written before schema 3 must give the
same census read-only (rows) and after its migration (columns).
"""

from __future__ import annotations

import sqlite3

import numpy as np
import pytest

from analysis.census import SAME_FM_STATION_HZ, SAME_STATION_HZ, census_matrix, display_name
from bandcensus.cli import main
from bandcensus.demo import demo_recordings
from survey.rds import RdsResult, merge_rds
from survey.records import ChannelReading, EmissionReading, RunInfo, SweepResult, SweepSettings
from survey.store import (SCHEMA_VERSION, SurveyStore, identified_sweep_ids, list_sweeps, open_for_reading,
                          read_channel_matrix, read_station_columns, read_station_rows)
from survey.units import db_to_ratio, ratio_to_db

SETTINGS = SweepSettings(band="test", sample_rate_hz=2.4e6, usable_fraction=0.75, fft_size=2048)
RASTER = 87_500_000 + 100_000 * np.arange(40)


# --------------------------------------------------------------------- the row-by-row reference

def _reference_clusters(rows):
    """Clusters as the census formed them row by row: [(freq, kind, channel, members)]."""
    out = []
    for kind, tolerance in (("fm", SAME_FM_STATION_HZ), ("narrow", SAME_STATION_HZ)):
        ordered = sorted((r for r in rows if r.kind == kind), key=lambda r: r.freq_hz)
        if not ordered:
            continue
        freqs = np.asarray([r.freq_hz for r in ordered])
        breaks = np.flatnonzero(np.diff(freqs) > tolerance) + 1
        for part in np.split(np.arange(len(ordered)), breaks):
            members = [ordered[i] for i in part.tolist()]
            chans = [m.channel_freq_hz for m in members]
            out.append((float(np.median(freqs[part])), kind, max(set(chans), key=chans.count), members))
    return sorted(out, key=lambda c: c[0])


def _reference_identity(members):
    if not any(r.rds_pi is not None or r.rds_blocks for r in members):
        return merge_rds(())
    return merge_rds(RdsResult.from_columns(r.rds_pi, r.rds_ps, r.rds_pty, r.rds_blocks, r.rds_block_errors)
                     for r in members)


def reference_census(conn, sweeps, kinds=("fm",)):
    """The census matrix computed from ``read_station_rows``, one Python record per emission."""
    ids = [int(s.id) for s in sweeps]
    margin = {int(s.id): float(s.received_margin_db) for s in sweeps}
    rows = [r for r in read_station_rows(conn, ids) if r.kind in set(kinds)]
    clusters = _reference_clusters(rows)
    n, m = len(ids), len(clusters)
    out = {k: np.full((n, m), np.nan) for k in ("power_dbfs", "noise_dbfs", "cn_db", "ci_db")}
    out.update(detected=np.zeros((n, m), bool), stereo=np.zeros((n, m), bool), heard=np.zeros((n, m), bool),
               rds_blocks=np.zeros((n, m), np.int64), rds_block_errors=np.zeros((n, m), np.int64))
    row_of = {sid: i for i, sid in enumerate(ids)}
    for j, (_, _, _, members) in enumerate(clusters):
        best: dict[int, object] = {}
        for r in members:
            i = row_of[r.sweep_id]
            out["rds_blocks"][i, j] += r.rds_blocks
            out["rds_block_errors"][i, j] += r.rds_block_errors
            key = -np.inf if np.isnan(r.cn_db) else r.cn_db
            if i not in best or key > (-np.inf if np.isnan(best[i].cn_db) else best[i].cn_db):
                best[i] = r
        for i, r in best.items():
            out["heard"][i, j] = True
            out["power_dbfs"][i, j], out["noise_dbfs"][i, j], out["cn_db"][i, j] = r.power_dbfs, r.noise_dbfs, r.cn_db
            out["ci_db"][i, j] = np.nan if r.ci_db is None else r.ci_db
            out["stereo"][i, j] = r.stereo
            out["detected"][i, j] = np.isfinite(r.cn_db) and r.cn_db >= margin[r.sweep_id]
    channels = read_channel_matrix(conn, ids)
    axis = channels.freqs_hz
    for j, (_, _, chan, _) in enumerate(clusters):
        k = np.searchsorted(axis, chan)
        if k >= axis.size or axis[k] != chan:
            continue
        for i in range(n):
            if out["heard"][i, j]:
                continue
            p, q = float(channels.power_dbfs[i, k]), float(channels.noise_dbfs[i, k])
            out["power_dbfs"][i, j], out["noise_dbfs"][i, j] = p, q
            with np.errstate(invalid="ignore", over="ignore"):
                c = float(ratio_to_db(float(db_to_ratio(p - q)) - 1.0))
            out["cn_db"][i, j] = c if np.isfinite(c) else np.nan
    out["freqs_hz"] = np.asarray([c[0] for c in clusters])
    out["kinds"] = tuple(c[1] for c in clusters)
    out["channel_freqs_hz"] = np.asarray([c[2] for c in clusters], np.int64)
    out["identities"] = tuple(_reference_identity(c[3]) for c in clusters)
    other = [i for i in identified_sweep_ids(conn) if i not in set(ids)]
    named = [r for r in read_station_rows(conn, other) if r.kind == "fm" and r.rds_pi is not None]
    names = []
    for (f, kind, _, members), ident in zip(clusters, out["identities"]):
        near = [r for r in named if kind == "fm" and abs(r.freq_hz - f) <= SAME_FM_STATION_HZ]
        names.append(display_name(_reference_identity([*members, *near]) if near else ident))
    out["names"] = tuple(names)
    del out["heard"]
    return out


def _assert_same(matrix, reference):
    for name, want in reference.items():
        got = getattr(matrix, name)
        if isinstance(want, tuple):
            assert got == want, name
        else:
            np.testing.assert_array_equal(np.asarray(got), want, err_msg=name)  # NaN equal to NaN


# --------------------------------------------------------------------- random emission sets

def _random_sweeps(seed: int, n_sweeps: int = 12) -> list[SweepResult]:
    """Sweeps of random emissions: stations that drift, pairs closer than the tolerance, narrow
    lines among them, emissions with no C/N or no C/I, two emissions of one station in a sweep,
    RDS on a few, and clusters whose emissions split evenly between two raster channels."""
    rng = np.random.default_rng(seed)
    carriers = np.sort(rng.choice(RASTER, 14, replace=False)).astype(float)
    carriers[3] = carriers[2] + 40_000.0                # an FM pair 40 kHz apart: linked by drift
    lines = rng.uniform(RASTER[0], RASTER[-1], 5)
    lines[1] = lines[0] + 4_000.0                        # two narrow lines within 5 kHz
    out = []
    for k in range(n_sweeps):
        t = f"2026-06-01T20:{k // 60:02d}:{k % 60:02d}.000000Z"
        emissions = []
        for f in carriers:
            if rng.random() < 0.25:
                continue
            carrier = f + rng.normal(0, 6_000.0)
            chan = int(RASTER[np.argmin(np.abs(RASTER - carrier))]) if rng.random() < 0.8 else int(f) + 100_000
            cn = float(rng.uniform(-3, 40)) if rng.random() < 0.9 else float("nan")
            rds = rng.random() < 0.1
            emissions.append(EmissionReading(
                freq_hz=float(carrier), hop_index=int(k % 3), kind="fm", occupied_bw_hz=float(rng.uniform(5e4, 2e5)),
                power_dbfs=float(rng.uniform(-60, -10)), noise_dbfs=float(rng.uniform(-75, -60)), cn_db=cn,
                ci_db=None if rng.random() < 0.5 else float(rng.uniform(0, 40)), stereo=bool(rng.random() < 0.5),
                channel_freq_hz=chan, separable=bool(rng.random() < 0.9),
                rds_pi=0xE3D2 if rds else None, rds_ps="HILL____" if rds else None, rds_pty=10 if rds else None,
                rds_blocks=int(rng.integers(1, 50)) if rds else 0, rds_block_errors=int(rng.integers(0, 3)) if rds else 0))
            if rng.random() < 0.08:  # the same station found twice in one sweep (a hop overlap)
                emissions.append(EmissionReading(
                    freq_hz=float(carrier + 3_000.0), hop_index=int(k % 3) + 1, kind="fm", occupied_bw_hz=1.5e5,
                    power_dbfs=-30.0, noise_dbfs=-70.0, cn_db=float(rng.uniform(-3, 40)), ci_db=None, stereo=False,
                    channel_freq_hz=chan))
        for f in lines:
            if rng.random() < 0.5:
                emissions.append(EmissionReading(
                    freq_hz=float(f + rng.normal(0, 800.0)), hop_index=0, kind="narrow", occupied_bw_hz=500.0,
                    power_dbfs=-50.0, noise_dbfs=-72.0, cn_db=float(rng.uniform(0, 30)), ci_db=None, stereo=False,
                    channel_freq_hz=int(RASTER[np.argmin(np.abs(RASTER - f))])))
        channels = tuple(ChannelReading(int(f), 0, float(rng.uniform(-70, -20)), float(rng.uniform(-75, -65)),
                                        -120.0, None, bool(rng.random() < 0.5)) for f in RASTER)
        out.append(SweepResult("bare" if k % 2 == 0 else "preamp", "antenna", t, t, SETTINGS, (), channels,
                               emissions=tuple(emissions)))
    return out


def _write(path, results) -> None:
    with SurveyStore(path) as store:
        run = store.begin_run(RunInfo("simulated", "unit", "test", {}))
        for r in results:
            store.write_sweep(run, r)
        store.end_run(run)


def _downgrade_to_schema_2(path) -> None:
    """The database as schema 2 wrote it: no columnar station copy, no identification index."""
    conn = sqlite3.connect(path)
    conn.execute("DROP INDEX stations_identified")
    conn.execute("DROP TABLE station_vectors")
    conn.execute("PRAGMA user_version = 2")
    conn.commit()
    conn.close()


@pytest.fixture(scope="module")
def random_db(tmp_path_factory):
    path = tmp_path_factory.mktemp("columns") / "random.db"
    _write(path, [s for seed in range(3) for s in _random_sweeps(seed)])
    return path


def _rows_as_columns(rows):
    return {
        "sweep_id": [r.sweep_id for r in rows], "freq_hz": [r.freq_hz for r in rows],
        "hop_index": [r.hop_index for r in rows], "occupied_bw_hz": [r.occupied_bw_hz for r in rows],
        "power_dbfs": [r.power_dbfs for r in rows], "noise_dbfs": [r.noise_dbfs for r in rows],
        "cn_db": [r.cn_db for r in rows], "ci_db": [np.nan if r.ci_db is None else r.ci_db for r in rows],
        "stereo": [r.stereo for r in rows], "channel_freq_hz": [r.channel_freq_hz for r in rows],
        "separable": [r.separable for r in rows], "rds_pi": [-1 if r.rds_pi is None else r.rds_pi for r in rows],
        "rds_pty": [-1 if r.rds_pty is None else r.rds_pty for r in rows], "rds_blocks": [r.rds_blocks for r in rows],
        "rds_block_errors": [r.rds_block_errors for r in rows],
    }


def test_columns_read_back_every_station_row_in_order(random_db):
    conn = open_for_reading(random_db)
    ids = [s.id for s in list_sweeps(conn)][::-1]  # any order asked is kept
    rows = read_station_rows(conn, ids)
    cols = read_station_columns(conn, ids)
    n_rds = conn.execute("SELECT COUNT(*) FROM station_vectors WHERE n_rds > 0").fetchone()[0]
    conn.close()
    assert cols.size == len(rows) > 100 and 0 < n_rds < len(ids)  # both read paths are exercised
    for name, want in _rows_as_columns(rows).items():
        np.testing.assert_array_equal(getattr(cols, name), np.asarray(want), err_msg=name)
    assert [cols.kind_names[k] for k in cols.kind.tolist()] == [r.kind for r in rows]
    assert cols.rds_ps.tolist() == [r.rds_ps for r in rows]


@pytest.mark.parametrize("kinds", [("fm",), ("narrow",), ("fm", "narrow")])
def test_vectorised_census_equals_the_row_by_row_census(random_db, kinds):
    conn = open_for_reading(random_db)
    sweeps = list_sweeps(conn)
    for chosen in (sweeps, sweeps[::2], sweeps[5:9]):
        _assert_same(census_matrix(conn, chosen, kinds=kinds), reference_census(conn, chosen, kinds))
    conn.close()


def test_census_without_detail_is_the_census_less_ci_and_stereo(random_db):
    # what the comparisons read (Survey.item_matrix) leaves out C/I and the stereo flag; every other
    # field, and rows taken from it, must be those of the full census
    conn = open_for_reading(random_db)
    sweeps = list_sweeps(conn)
    full, lean = census_matrix(conn, sweeps, kinds=("fm", "narrow")), census_matrix(conn, sweeps, ("fm", "narrow"),
                                                                                    detail=False)
    some = [int(i) for i in full.sweep_ids[::3][::-1]]
    for a, b in ((full, lean), (full.rows(some), lean.rows(some))):
        assert np.isfinite(a.ci_db).any() and a.stereo.any()  # the data hold both, so leaving them out shows
        assert np.isnan(b.ci_db).all() and not b.stereo.any() and b.ci_db.shape == b.stereo.shape == a.cn_db.shape
        for name in ("sweep_ids", "freqs_hz", "channel_freqs_hz", "power_dbfs", "noise_dbfs", "cn_db", "detected",
                     "rds_blocks", "rds_block_errors"):
            np.testing.assert_array_equal(getattr(b, name), getattr(a, name), err_msg=name)
        assert (b.started_utc, b.kinds, b.names, b.identities) == (a.started_utc, a.kinds, a.names, a.identities)
    cols, without = read_station_columns(conn, [s.id for s in sweeps]), read_station_columns(
        conn, [s.id for s in sweeps], leave_out=("ci_db",))
    assert np.isfinite(cols.ci_db).any() and np.isnan(without.ci_db).all() and without.ci_db.size == cols.size
    np.testing.assert_array_equal(without.cn_db, cols.cn_db)
    with pytest.raises(ValueError, match="cannot leave out power_dbfs"):
        read_station_columns(conn, [s.id for s in sweeps], leave_out=("power_dbfs",))
    conn.close()


def test_a_schema_2_database_gives_the_same_census_read_only_and_after_migrating(tmp_path):
    path = tmp_path / "v2.db"
    _write(path, _random_sweeps(11))
    conn = open_for_reading(path)
    before = census_matrix(conn, list_sweeps(conn), kinds=("fm", "narrow"))
    conn.close()
    _downgrade_to_schema_2(path)
    conn = open_for_reading(path)  # read-only: every sweep from its rows
    assert conn.execute("SELECT 1 FROM sqlite_master WHERE name='station_vectors'").fetchone() is None
    read_only = census_matrix(conn, list_sweeps(conn), kinds=("fm", "narrow"))
    conn.close()
    with SurveyStore(path) as store:  # opening for writing builds the columnar copy
        assert store.schema_version == SCHEMA_VERSION == 3
    conn = open_for_reading(path)
    built = conn.execute("SELECT COUNT(*) FROM station_vectors").fetchone()[0]
    migrated = census_matrix(conn, list_sweeps(conn), kinds=("fm", "narrow"))
    reference = reference_census(conn, list_sweeps(conn), ("fm", "narrow"))
    conn.close()
    assert built == 12
    for m in (before, read_only, migrated):
        _assert_same(m, reference)


# --------------------------------------------------------------------- the demo

@pytest.fixture(scope="module")
def demo_db(tmp_path_factory):
    path = tmp_path_factory.mktemp("columns-demo") / "demo.db"
    assert main(["replay", *[str(p) for p in demo_recordings()], "--db", str(path), "--quiet"]) == 0
    return path


def test_demo_census_equals_the_row_by_row_census(demo_db):
    conn = open_for_reading(demo_db)
    sweeps = list_sweeps(conn)
    labels = sorted({(s.configuration, s.input) for s in sweeps})
    assert len(labels) > 3
    for kinds in (("fm",), ("fm", "narrow")):
        _assert_same(census_matrix(conn, sweeps, kinds=kinds), reference_census(conn, sweeps, kinds))
        for label in labels:
            chosen = [s for s in sweeps if (s.configuration, s.input) == label]
            _assert_same(census_matrix(conn, chosen, kinds=kinds), reference_census(conn, chosen, kinds))
    conn.close()
