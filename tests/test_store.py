"""SQLite store: schema, one transaction per sweep, read helpers, refusal of foreign files."""

import sqlite3

import numpy as np
import pytest

from survey.errors import StoreError
from survey.records import ChannelReading, HopReading, RunInfo, SweepResult, SweepSettings
from survey.store import (
    SCHEMA_VERSION,
    SurveyStore,
    list_runs,
    list_sweeps,
    open_for_reading,
    read_channel_matrix,
    read_hops,
    read_spectra,
)


def _sweep(configuration="bare", input="antenna", started="2026-06-01T20:00:00.000000Z", offset_db=0.0,
           freqs=(88_000_000, 88_100_000, 88_200_000), keep_psd=False):
    hop = HopReading(
        index=0, center_hz=88.5e6, sample_rate_hz=2.4e6, n_samples=24000, clip_fraction=0.0,
        floor_dbfs_hz=-120.0, started_utc=started,
        psd_freqs_hz=np.linspace(87.6e6, 89.4e6, 16) if keep_psd else None,
        psd_dbfs_hz=np.full(16, -120.5, np.float32) if keep_psd else None,
    )
    chans = tuple(
        ChannelReading(freq_hz=f, hop_index=0, power_dbfs=-60.0 + offset_db + k, noise_dbfs=-67.0,
                       noise_density_dbfs_hz=-120.0, cn_db=6.0 + k, received=True)
        for k, f in enumerate(freqs)
    )
    return SweepResult(configuration, input, started, started, SweepSettings(band="europe"), (hop,), chans)


def test_schema_version_and_wal(tmp_path):
    db = tmp_path / "s.db"
    with SurveyStore(db) as store:
        assert store.schema_version == SCHEMA_VERSION
        assert store.conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_write_and_read_back(tmp_path):
    db = tmp_path / "s.db"
    with SurveyStore(db) as store:
        run = store.begin_run(RunInfo("simulated", "sim", "0.1.0", {"a": 1}, seed=7))
        s1 = store.write_sweep(run, _sweep(), keep_spectra=True)
        s2 = store.write_sweep(run, _sweep("preamp", started="2026-06-01T20:01:00.000000Z", offset_db=3.0,
                                           keep_psd=True), keep_spectra=True)
        store.end_run(run)
    conn = open_for_reading(db)
    runs = list_runs(conn)
    assert runs[0]["seed"] == 7 and runs[0]["complete_sweeps"] == 2 and runs[0]["status"] == "finished"
    sweeps = list_sweeps(conn, configuration="preamp")
    assert [s.id for s in sweeps] == [s2]
    m = read_channel_matrix(conn, [s1, s2])
    assert m.freqs_hz.tolist() == [88_000_000, 88_100_000, 88_200_000]
    assert m.power_dbfs[1, 0] == pytest.approx(-57.0)
    # C/N recomputed from P and N: 10log10(10**(0.7) - 1) for P - N = 7 dB
    assert m.cn_db[0, 0] == pytest.approx(10 * np.log10(10 ** 0.7 - 1), abs=1e-5)
    assert len(read_hops(conn, [s1])) == 1
    spectra = read_spectra(conn, s2)
    assert len(spectra) == 1 and spectra[0][1][0] == pytest.approx(-120.5)
    assert read_spectra(conn, s1) == []  # no PSD attached, nothing kept
    rows = conn.execute("SELECT COUNT(*) FROM channels").fetchone()[0]
    assert rows == 6


def test_failed_sweep_write_rolls_back(tmp_path):
    db = tmp_path / "s.db"
    store = SurveyStore(db)
    run = store.begin_run(RunInfo("simulated", "sim", "0.1.0", {}))
    store.write_sweep(run, _sweep())
    bad = _sweep(freqs=(88_000_000, 88_000_000))  # duplicate channel: violates the primary key
    with pytest.raises(StoreError):
        store.write_sweep(run, bad)
    assert store.conn.execute("SELECT COUNT(*) FROM sweeps").fetchone()[0] == 1
    assert store.conn.execute("SELECT COUNT(*) FROM hops").fetchone()[0] == 1
    assert store.integrity_ok()
    store.close()


def test_matrix_with_different_channel_sets(tmp_path):
    db = tmp_path / "s.db"
    with SurveyStore(db) as store:
        run = store.begin_run(RunInfo("recording", "file", "0.1.0", {}))
        a = store.write_sweep(run, _sweep(freqs=(88_000_000, 88_100_000)))
        b = store.write_sweep(run, _sweep(freqs=(88_100_000, 88_200_000)))
    m = read_channel_matrix(open_for_reading(db), [a, b])
    assert m.freqs_hz.tolist() == [88_000_000, 88_100_000, 88_200_000]
    assert np.isnan(m.power_dbfs[0, 2]) and np.isnan(m.power_dbfs[1, 0])
    assert not m.received[1, 0]


def test_refuses_foreign_and_missing(tmp_path):
    other = tmp_path / "other.db"
    c = sqlite3.connect(other)
    c.execute("CREATE TABLE notes (x)")
    c.commit()
    c.close()
    with pytest.raises(StoreError, match="another program"):
        SurveyStore(other)
    with pytest.raises(StoreError, match="does not exist"):
        open_for_reading(tmp_path / "missing.db")
    junk = tmp_path / "junk.db"
    junk.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(StoreError, match="not a bandcensus database"):
        SurveyStore(junk)
    with pytest.raises(StoreError, match="folder"):
        SurveyStore(tmp_path)


def test_newer_schema_refused(tmp_path):
    db = tmp_path / "s.db"
    SurveyStore(db).close()
    c = sqlite3.connect(db)
    c.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    c.commit()
    c.close()
    with pytest.raises(StoreError, match="newer"):
        SurveyStore(db)
