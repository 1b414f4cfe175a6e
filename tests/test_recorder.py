"""SigMF writer (survey.recorder): validity, exact replay, crash safety, refusals."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest
import sigmf
import sigmf.schema
import sigmf.validate

from bandcensus import __version__
from survey.errors import RecordingError
from survey.recorder import SweepRecorder
from survey.records import BandPlan, IQBlock, SweepSettings
from survey.sources.recording import open_recording

FS_HZ = 2_400_000.0
LABELS = dict(configuration="preamp-a", input="antenna", gain_db=29.7, ppm=-3, device="simulated receiver",
              seed=42, band="europe", channel_bw_hz=200_000.0, description="simulated sweep, invented site")


def make_blocks(n_hops: int = 3, n: int = 8192, seed: int = 5, centers=None) -> list[IQBlock]:
    """cu8 blocks of dithered noise plus one tone per hop, as the receiver delivers them."""
    rng = np.random.default_rng(seed)
    centers = centers or [88_600_000.0 + 1_800_000.0 * k for k in range(n_hops)]
    out = []
    t = np.arange(n) / FS_HZ
    for k, fc in enumerate(centers):
        z = 0.02 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
        z += 0.3 * np.exp(2j * np.pi * (300_000.0 + 100_000.0 * k) * t)
        inter = np.empty(2 * n)
        inter[0::2], inter[1::2] = z.real, z.imag
        raw = np.clip(np.round(inter * 127.5 + 127.5), 0, 255).astype(np.uint8)
        out.append(IQBlock(fc, FS_HZ, "cu8", raw, f"2026-03-01T12:00:{k:02d}.250000Z"))
    return out


def record(directory: Path, blocks, name: str = "sweep") -> Path:
    rec = SweepRecorder(directory, name, **LABELS)
    for b in blocks:
        rec.add_block(b)
    return rec.finish()


def test_sigmf_validator_accepts_our_recording(tmp_path):
    blocks = make_blocks()
    meta_path = record(tmp_path, blocks)
    assert meta_path == tmp_path / "sweep.sigmf-meta"
    doc = json.loads(meta_path.read_text())
    # sigmf-python 1.14 validator against the SigMF 1.2.6 JSON schema (sigmf.validate.validate);
    # an undeclared namespace would warn, and warnings are errors in this test run
    sigmf.validate.validate(doc, sigmf.schema.get_schema())
    # and the library's own reader, checksum included (core:sha512 computed while streaming)
    sf = sigmf.fromfile(str(meta_path), skip_checksum=False)
    sf.validate()
    g = doc["global"]
    assert g["core:extensions"] == [{"name": "bandcensus", "version": "0.1.0", "optional": True}]
    assert g["core:datatype"] == "cu8" and g["core:sample_rate"] == FS_HZ
    assert g["core:recorder"] == f"bandcensus {__version__}" and g["core:hw"] == "simulated receiver"
    assert g["core:description"] == LABELS["description"]
    ours = {k: v for k, v in g.items() if not k.startswith("core:")}
    assert ours == {"bandcensus:configuration": "preamp-a", "bandcensus:input": "antenna",
                    "bandcensus:gain_db": 29.7, "bandcensus:ppm": -3, "bandcensus:seed": 42,
                    "bandcensus:band": "europe", "bandcensus:channel_bw_hz": 200_000.0}
    assert [(c["core:sample_start"], c["core:frequency"], c["core:datetime"]) for c in doc["captures"]] == [
        (8192 * k, b.center_hz, b.started_utc) for k, b in enumerate(blocks)]
    # the bytes on disk are the blocks' bytes, read back through sigmf (independent of our reader)
    ref = sigmf.fromfile(str(meta_path), autoscale=False)
    for k, b in enumerate(blocks):
        z = ref.read_samples_in_capture(k)
        np.testing.assert_array_equal(z.real, b.raw[0::2].astype(np.float32))
        np.testing.assert_array_equal(z.imag, b.raw[1::2].astype(np.float32))


def test_labels_read_back_and_none_fields_omitted(tmp_path):
    meta_path = record(tmp_path, make_blocks(1))
    assert open_recording(meta_path).metadata_labels() == {
        "configuration": "preamp-a", "input": "antenna", "band": "europe", "gain_db": 29.7,
        "channel_bw_hz": 200_000.0, "ppm": -3, "seed": 42}
    rec = SweepRecorder(tmp_path, "auto", **{**LABELS, "gain_db": None, "seed": None, "description": ""})
    rec.add_block(make_blocks(1)[0])
    doc = json.loads(rec.finish().read_text())
    assert "bandcensus:gain_db" not in doc["global"] and "bandcensus:seed" not in doc["global"]
    assert "core:description" not in doc["global"]
    labels = open_recording(tmp_path / "auto.sigmf-data").metadata_labels()
    assert labels["gain_db"] is None and labels["seed"] is None and labels["ppm"] == -3


def test_repeated_centres_give_one_capture_per_block(tmp_path):
    # sigmf merges captures that share a dict or a sample_start; each hop must stay its own capture
    blocks = make_blocks(centers=[90e6, 90e6, 92e6, 90e6], n=1000)
    src = open_recording(record(tmp_path, blocks))
    assert src.fixed_centers_hz == (90e6, 90e6, 92e6, 90e6)
    for b in blocks:
        src.tune(b.center_hz)
        got = src.read(None)
        np.testing.assert_array_equal(got.raw, b.raw)
        assert got.started_utc == b.started_utc


@pytest.mark.parametrize("datatype,dtype", [("ci8", np.int8), ("ci16_le", "<i2"), ("cf32_le", "<f4")])
def test_other_datatypes_round_trip(tmp_path, datatype, dtype):
    rng = np.random.default_rng(3)
    blocks = [IQBlock(95e6 + k, FS_HZ, datatype, (rng.standard_normal(600) * 50).astype(dtype),
                      "2026-03-01T12:00:00.000000Z") for k in range(2)]
    src = open_recording(record(tmp_path, blocks))
    for b in blocks:
        src.tune(b.center_hz)
        np.testing.assert_array_equal(src.read(None).raw, b.raw)


def test_no_blocks_writes_nothing(tmp_path):
    rec = SweepRecorder(tmp_path / "new", "empty", **LABELS)
    assert rec.finish() is None
    assert not (tmp_path / "new").exists() or list((tmp_path / "new").iterdir()) == []


def test_unfinished_recording_is_invisible_and_abort_removes_it(tmp_path):
    rec = SweepRecorder(tmp_path, "sweep", **LABELS)
    for b in make_blocks():
        rec.add_block(b)
    names = sorted(p.name for p in tmp_path.iterdir())
    assert len(names) == 1 and names[0].startswith(".sweep.sigmf-data") and names[0].endswith(".partial")
    with pytest.raises(RecordingError):
        open_recording(tmp_path / "sweep")
    rec.abort()
    rec.abort()
    assert list(tmp_path.iterdir()) == []


def test_failure_while_finishing_leaves_no_meta_and_no_partial_files(tmp_path, monkeypatch):
    rec = SweepRecorder(tmp_path, "sweep", **LABELS)
    for b in make_blocks():
        rec.add_block(b)
    real_replace = os.replace

    def failing_replace(src, dst):
        if str(dst).endswith(".sigmf-meta"):
            raise OSError(28, "No space left on device")
        return real_replace(src, dst)

    monkeypatch.setattr(os, "replace", failing_replace)
    with pytest.raises(RecordingError, match="No space left on device; free disk space"):
        rec.finish()
    assert list(tmp_path.iterdir()) == []


def test_data_is_in_place_before_the_meta(tmp_path, monkeypatch):
    order = []
    real_replace = os.replace
    monkeypatch.setattr(os, "replace", lambda s, d: (order.append(Path(d).name), real_replace(s, d)))
    record(tmp_path, make_blocks(1))
    assert order == ["sweep.sigmf-data", "sweep.sigmf-meta"]


def test_context_manager_finishes_or_aborts(tmp_path):
    with SweepRecorder(tmp_path, "ok", **LABELS) as rec:
        rec.add_block(make_blocks(1)[0])
    assert (tmp_path / "ok.sigmf-meta").is_file()
    with pytest.raises(ZeroDivisionError):
        with SweepRecorder(tmp_path, "bad", **LABELS) as rec:
            rec.add_block(make_blocks(1)[0])
            1 / 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ok.sigmf-data", "ok.sigmf-meta"]


def test_refusals(tmp_path):
    record(tmp_path, make_blocks(1))
    with pytest.raises(RecordingError, match=r"sweep\.sigmf-data already exists; choose another"):
        SweepRecorder(tmp_path, "sweep", **LABELS)
    with pytest.raises(RecordingError, match="base name"):
        SweepRecorder(tmp_path, "x.sigmf-meta", **LABELS)
    rec = SweepRecorder(tmp_path, "mixed", **LABELS)
    first = make_blocks(1)[0]
    rec.add_block(first)
    other_rate = IQBlock(first.center_hz, 2_048_000.0, "cu8", first.raw, first.started_utc)
    with pytest.raises(RecordingError, match=r"mixed\.sigmf-data.*2048000 S/s.*one datatype and sample rate"):
        rec.add_block(other_rate)
    other_type = IQBlock(first.center_hz, FS_HZ, "ci8", first.raw.view(np.int8), first.started_utc)
    with pytest.raises(RecordingError, match="cu8 at 2400000 S/s"):
        rec.add_block(other_type)
    with pytest.raises(RecordingError, match="needs an even number of interleaved uint8"):
        rec.add_block(IQBlock(first.center_hz, FS_HZ, "cu8", first.raw.astype(np.int16), first.started_utc))
    with pytest.raises(RecordingError, match="cannot be recorded; supported"):
        rec.add_block(IQBlock(first.center_hz, FS_HZ, "ci32_le", first.raw, first.started_utc))
    with pytest.raises(RecordingError, match="not an ISO 8601"):
        rec.add_block(IQBlock(first.center_hz, FS_HZ, "cu8", first.raw, "noon"))
    assert rec.n_captures == 1  # refused blocks were not written
    meta = rec.finish()
    assert open_recording(meta).capture_lengths() == (first.n_samples,)
    with pytest.raises(RecordingError, match="already finished"):
        rec.add_block(first)


class BlockListSource:
    """The original blocks behind the IQSource protocol, one capture-like hop per block."""

    kind = "simulated"

    def __init__(self, blocks):
        self._blocks = blocks
        self._next = 0
        self._current = None

    @property
    def sample_rate_hz(self):
        return self._blocks[0].sample_rate_hz

    @property
    def fixed_centers_hz(self):
        return tuple(b.center_hz for b in self._blocks)

    def describe(self):
        return {}

    def tune(self, center_hz):
        assert abs(self._blocks[self._next].center_hz - center_hz) <= 1.0
        self._current, self._next = self._blocks[self._next], self._next + 1

    def read(self, n_samples):
        assert n_samples is None
        return self._current

    def close(self):
        pass


def test_writer_then_replay_gives_the_same_channel_rows(tmp_path):
    from survey.sweep import plan_for_source, run_sweep

    blocks = make_blocks(n_hops=4, n=16_384)
    channels = tuple(range(87_500_000, 108_000_001, 100_000))
    band = BandPlan("test-raster", channels[0], channels[-1], 100_000, channels)
    settings = SweepSettings(band="test-raster")
    original = BlockListSource(blocks)
    plan = plan_for_source(band, original, settings)
    rec = SweepRecorder(tmp_path, "kept", **LABELS)
    measured = run_sweep(original, plan, settings, "preamp-a", "antenna", sink=rec)
    meta = rec.finish()

    replay = open_recording(meta)
    assert plan_for_source(band, replay, settings) == plan
    replayed = run_sweep(replay, plan, settings, "preamp-a", "antenna")
    assert len(measured.channels) > 20
    assert replayed.channels == measured.channels  # frozen dataclasses: every float identical
    assert replayed.hops == measured.hops
    assert (replayed.started_utc, replayed.ended_utc) == (measured.started_utc, measured.ended_utc)
