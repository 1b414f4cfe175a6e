"""SigMF replay (survey.sources.recording): raw reads, path spellings, times, bad input, physics.

Fixtures are tiny recordings built in ``tmp_path`` with the sigmf reference library itself
(sigmf-python 1.14, SigMF 1.2.6), not with our writer, so they stand for foreign recordings.
"""

from __future__ import annotations

import json
import os
import tarfile
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest
import sigmf

from survey.errors import RecordingError
from survey.records import BandPlan, SweepSettings
from survey.sources.base import IQSource
from survey.sources.recording import COMPONENT_DTYPES, normalize_utc, open_recording

FS_HZ = 2_400_000.0


# -- fixtures built with sigmf directly ----------------------------------------------------------
def encode(z: np.ndarray, datatype: str) -> np.ndarray:
    """Complex full-scale samples to interleaved raw values of ``datatype`` (see :data:`SCALES`)."""
    inter = np.empty(2 * z.size, np.float64)
    inter[0::2], inter[1::2] = z.real, z.imag
    if datatype == "cf32_le":
        return inter.astype("<f4")
    scale, offset, lo, hi = SCALES[datatype]
    return np.clip(np.round(inter * scale + offset), lo, hi).astype(COMPONENT_DTYPES[datatype])


#: datatype -> (scale, offset, min, max) with full-scale value = (raw - offset) / scale.
#: cu8 from the design notes (the receiver library's convention); ci8 b/128 and ci16 b/32768 as
#: documented in survey.dsp (full scale at the negative rail).
SCALES = {
    "cu8": (127.5, 127.5, 0, 255),
    "ci8": (128.0, 0.0, -128, 127),
    "ci16_le": (32768.0, 0.0, -32768, 32767),
}


def write_foreign(
    directory: Path,
    name: str,
    datatype: str,
    captures: list[dict],
    raw: np.ndarray,
    *,
    sample_rate_hz: float | None = FS_HZ,
    sha512: bool = True,
    annotations: tuple[tuple[int, int], ...] = (),
    extra_global: dict | None = None,
) -> Path:
    """Write ``raw`` and a metadata file with sigmf; ``captures`` are dicts with core:sample_start."""
    base = directory / name
    data = base.with_name(name + ".sigmf-data")
    raw.tofile(data)
    g = {sigmf.DATATYPE_KEY: datatype, sigmf.HW_KEY: "simulated foreign receiver",
         sigmf.RECORDER_KEY: "hand-built test fixture"}
    if sample_rate_hz is not None:
        g[sigmf.SAMPLE_RATE_KEY] = sample_rate_hz
    g.update(extra_global or {})
    meta = sigmf.SigMFFile(data_file=str(data), global_info=g, skip_checksum=not sha512)
    for cap in captures:
        cap = dict(cap)  # sigmf keeps and mutates the dict it is given
        meta.add_capture(cap.pop(sigmf.SAMPLE_START_KEY), metadata=cap)
    for start, count in annotations:
        meta.add_annotation(start, length=count, metadata={sigmf.LABEL_KEY: "segment"})
    meta.tofile(str(base), overwrite=True)
    return base.with_name(name + ".sigmf-meta")


def noise_recording(directory: Path, datatype: str, centers_hz=(88.5e6, 91.2e6, 88.5e6),
                    lengths=(4096, 3000, 5000), seed: int = 7, **kw) -> tuple[Path, list[np.ndarray]]:
    """Gaussian noise at -20 dBFS per capture; returns the meta path and each capture's raw values."""
    rng = np.random.default_rng(seed)
    parts, caps, start = [], [], 0
    for k, (fc, n) in enumerate(zip(centers_hz, lengths)):
        z = 0.1 * (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / np.sqrt(2)
        parts.append(encode(z, datatype))
        caps.append({sigmf.SAMPLE_START_KEY: start, sigmf.FREQUENCY_KEY: fc,
                     sigmf.DATETIME_KEY: f"2026-03-01T12:00:0{k}Z"})
        start += n
    meta = write_foreign(directory, f"noise_{datatype}", datatype, caps, np.concatenate(parts), **kw)
    return meta, parts


# -- reading --------------------------------------------------------------------------------------
@pytest.mark.parametrize("datatype", list(COMPONENT_DTYPES))
def test_raw_blocks_match_sigmf_reader(tmp_path, datatype):
    meta, parts = noise_recording(tmp_path, datatype)
    src = open_recording(meta)
    assert isinstance(src, IQSource) and src.kind == "recording"
    assert src.sample_rate_hz == FS_HZ
    assert src.fixed_centers_hz == (88.5e6, 91.2e6, 88.5e6)
    assert src.capture_lengths() == (4096, 3000, 5000)
    # independent reference: sigmf's own reader without autoscale gives the raw values as complex64
    ref = sigmf.fromfile(str(meta), autoscale=False)
    for k, fc in enumerate(src.fixed_centers_hz):
        src.tune(fc)
        block = src.read(None)
        assert block.datatype == datatype and block.raw.dtype == COMPONENT_DTYPES[datatype]
        assert block.center_hz == fc and block.n_samples == parts[k].size // 2
        np.testing.assert_array_equal(block.raw, parts[k])
        z = ref.read_samples_in_capture(k)
        np.testing.assert_array_equal(block.raw[0::2].astype(np.float32), z.real)
        np.testing.assert_array_equal(block.raw[1::2].astype(np.float32), z.imag)
        # memory-mapped, not copied: a read-only view that does not own its data
        assert not block.raw.flags.owndata and not block.raw.flags.writeable
    src.close()
    src.close()


def test_path_spellings_and_archive_give_the_same_blocks(tmp_path):
    meta, parts = noise_recording(tmp_path, "ci16_le")
    base = meta.with_name("noise_ci16_le")
    archive = tmp_path / "arch" / "noise_ci16_le.sigmf"
    archive.parent.mkdir()
    sigmf.fromfile(str(meta)).tofile(str(archive))  # tar written by sigmf itself
    for given in (meta, base, base.with_name(base.name + ".sigmf-data"), str(base), archive,
                  archive.with_name("noise_ci16_le")):
        src = open_recording(given)
        for k, fc in enumerate(src.fixed_centers_hz):
            src.tune(fc)
            np.testing.assert_array_equal(src.read(None).raw, parts[k])
    assert open_recording(archive).describe()["container"] == "archive"


def test_tune_selects_next_capture_with_that_centre_and_reads_continue(tmp_path):
    meta, parts = noise_recording(tmp_path, "cu8")
    src = open_recording(meta)
    with pytest.raises(RecordingError, match="tune"):
        src.read(None)
    src.tune(88.5e6)
    np.testing.assert_array_equal(src.read(None).raw, parts[0])
    src.tune(88.5e6)  # the next capture at 88.5 MHz is capture 2, not capture 0 again
    first = src.read(1000)
    np.testing.assert_array_equal(first.raw, parts[2][:2000])
    second = src.read(500)  # a second read continues through the capture, like a receiver
    np.testing.assert_array_equal(second.raw, parts[2][2000:3000])
    assert first.started_utc == "2026-03-01T12:00:02.000000Z"
    assert second.started_utc == "2026-03-01T12:00:02.000417Z"  # + 1000 samples / 2.4 MS/s
    with pytest.raises(RecordingError, match="3500 samples left"):
        src.read(4000)
    src.tune(91_200_000)  # an integer centre selects the float core:frequency
    with pytest.raises(RecordingError, match=r"noise_cu8\.sigmf-meta.*3000 samples left but 3001"):
        src.read(3001)
    assert src.read(3000).n_samples == 3000
    with pytest.raises(RecordingError, match="no capture is centred at 100000000 Hz"):
        src.tune(100e6)


def test_timestamps_capture_derived_global_and_mtime(tmp_path):
    n = 2400
    raw = np.zeros(2 * 4 * n, np.int8)
    caps = [
        {sigmf.SAMPLE_START_KEY: 0, sigmf.FREQUENCY_KEY: 90e6, sigmf.DATETIME_KEY: "2026-03-01T12:00:00.123456789Z"},
        {sigmf.SAMPLE_START_KEY: n, sigmf.FREQUENCY_KEY: 92e6},
        {sigmf.SAMPLE_START_KEY: 2 * n, sigmf.FREQUENCY_KEY: 94e6, sigmf.DATETIME_KEY: "2026-03-01T13:00:00+01:00"},
        {sigmf.SAMPLE_START_KEY: 3 * n, sigmf.FREQUENCY_KEY: 96e6},
    ]
    src = open_recording(write_foreign(tmp_path, "times", "ci8", caps, raw))
    times = []
    for fc in src.fixed_centers_hz:
        src.tune(fc)
        times.append(src.read(None).started_utc)
    # 2400 samples at 2.4 MS/s = 1 ms; nine fraction digits truncate to six; +01:00 converts to UTC
    assert times == ["2026-03-01T12:00:00.123456Z", "2026-03-01T12:00:00.124456Z",
                     "2026-03-01T12:00:00.000000Z", "2026-03-01T12:00:00.001000Z"]
    assert src.describe()["time_sources"] == ["capture", "derived"]

    caps_none = [{sigmf.SAMPLE_START_KEY: k * n, sigmf.FREQUENCY_KEY: 90e6 + k * 1e6} for k in range(4)]
    meta = write_foreign(tmp_path, "noclock", "ci8", caps_none, raw,
                         extra_global={sigmf.DATETIME_KEY: "2026-03-01T00:00:00Z"})
    src = open_recording(meta)
    src.tune(92e6)
    assert src.read(None).started_utc == "2026-03-01T00:00:00.002000Z"
    assert src.describe()["time_sources"] == ["global"]

    meta = write_foreign(tmp_path, "mtime", "ci8", caps_none, raw)
    end = datetime(2026, 3, 2, 8, 0, 0, tzinfo=timezone.utc).timestamp()
    os.utime(meta.with_name("mtime.sigmf-data"), (end, end))
    src = open_recording(meta)
    src.tune(91e6)  # capture 1 starts 3 captures (3 ms) before the end of the data
    assert src.read(None).started_utc == "2026-03-02T07:59:59.997000Z"
    assert src.describe()["time_sources"] == ["file-mtime"]


def test_normalize_utc_matches_store_format():
    from survey.store import utc_now

    now = utc_now()
    assert normalize_utc(now) == now
    assert normalize_utc("2026-03-01T12:00:00Z") == "2026-03-01T12:00:00.000000Z"
    assert normalize_utc("2026-03-01T12:00:00.5") == "2026-03-01T12:00:00.500000Z"
    with pytest.raises(ValueError):
        normalize_utc("yesterday")


def test_describe_and_labels_of_a_foreign_recording(tmp_path):
    meta, _ = noise_recording(tmp_path, "cf32_le")
    src = open_recording(meta)
    d = src.describe()
    json.dumps(d)
    assert d["path"] == str(meta) and d["datatype"] == "cf32_le" and d["n_captures"] == 3
    assert d["hw"] == "simulated foreign receiver" and d["recorder"] == "hand-built test fixture"
    assert d["sha512"] is True and d["checksum_verified"] is True
    assert src.metadata_labels() == {k: None for k in
                                     ("configuration", "input", "band", "gain_db", "channel_bw_hz", "ppm", "seed")}
    assert open_recording(meta, skip_checksum=True).describe()["checksum_verified"] is False


def test_labels_of_wrong_type_are_refused(tmp_path):
    meta, _ = noise_recording(tmp_path, "cu8", extra_global={
        sigmf.EXTENSIONS_KEY: [{"name": "bandcensus", "version": "0.1.0", "optional": True}],
        "bandcensus:gain_db": "high", "bandcensus:configuration": "bare"})
    with pytest.raises(RecordingError, match=r"noise_cu8\.sigmf-meta: bandcensus:gain_db is 'high'"):
        open_recording(meta).metadata_labels()


# -- bad input: every case a RecordingError naming the file ---------------------------------------
def _edit_meta(meta: Path, change) -> None:
    doc = json.loads(meta.read_text())
    change(doc)
    meta.write_text(json.dumps(doc))


def _case(tmp_path: Path, case: str) -> tuple[Path, str, str]:
    """Make one bad recording; returns (path to open, file name expected in the message, regex)."""
    meta, _ = noise_recording(tmp_path, "ci16_le", sha512=(case == "checksum"))
    data = meta.with_name("noise_ci16_le.sigmf-data")
    if case == "missing":
        return tmp_path / "absent.sigmf-meta", "absent.sigmf-meta", "no such file"
    if case == "missing-data":
        data.unlink()
        return meta, "noise_ci16_le.sigmf-data", "data file missing"
    if case == "not-json":
        meta.write_text("{'global': oops")
        return meta, meta.name, "not JSON"
    if case == "not-utf8":
        meta.write_bytes(b"\xff\xfe\x00garbage")
        return meta, meta.name, "not JSON"
    if case == "not-sigmf":
        meta.write_text(json.dumps({"captures": [], "annotations": []}))
        return meta, meta.name, "not SigMF"
    if case == "not-sigmf-list":
        meta.write_text("[1, 2, 3]")
        return meta, meta.name, "not SigMF"
    if case in ("ci16_be", "rf32_le", "ci16", "cf64_le"):
        _edit_meta(meta, lambda d: d["global"].update({"core:datatype": case}))
        return meta, meta.name, rf"datatype '{case}' is not supported; supported: cu8, ci8, ci16_le, cf32_le"
    if case == "no-datatype":
        _edit_meta(meta, lambda d: d["global"].pop("core:datatype"))
        return meta, meta.name, "datatype None is not supported"
    if case == "no-rate":
        _edit_meta(meta, lambda d: d["global"].pop("core:sample_rate"))
        return meta, meta.name, "core:sample_rate is missing"
    if case == "bad-rate":
        _edit_meta(meta, lambda d: d["global"].update({"core:sample_rate": "fast"}))
        return meta, meta.name, "core:sample_rate is 'fast', not a number"
    if case == "no-frequency":
        _edit_meta(meta, lambda d: d["captures"][1].pop("core:frequency"))
        return meta, meta.name, "capture 1 has no core:frequency"
    if case == "no-captures":
        _edit_meta(meta, lambda d: d.update({"captures": []}))
        return meta, meta.name, "no capture segments"
    if case == "partial-sample":
        with open(data, "ab") as fh:
            fh.write(b"\x01")
        return meta, meta.name, "not a whole number of 4-byte samples"
    if case == "capture-beyond-end":
        _edit_meta(meta, lambda d: d["captures"][2].update({"core:sample_start": 12096}))
        return meta, meta.name, "data ends at sample 12096 but capture 2 starts at sample 12096"
    if case == "truncated-data":
        os.truncate(data, 4 * 6000)  # captures start at 0, 4096, 7096: the last one is cut away
        return meta, meta.name, "data ends at sample 6000 but capture 2 starts at sample 7096"
    if case == "annotation-beyond-end":
        _edit_meta(meta, lambda d: d.update({"annotations": [{"core:sample_start": 7096, "core:sample_count": 6000}]}))
        return meta, meta.name, "annotation 0 reaches sample 13096"
    if case == "unsorted":
        _edit_meta(meta, lambda d: d["captures"][2].update({"core:sample_start": 4096}))
        return meta, meta.name, "capture 2 starts at sample 4096, not after capture 1"
    if case == "checksum":
        with open(data, "r+b") as fh:
            fh.seek(100)
            b = fh.read(1)
            fh.seek(100)
            fh.write(bytes([b[0] ^ 0xFF]))
        return meta, meta.name, r"checksum \(core:sha512\) does not match"
    if case == "empty":
        data.write_bytes(b"")
        return meta, meta.name, "empty"
    if case == "schema":
        _edit_meta(meta, lambda d: d["global"].update({"core:hw": 123}))
        return meta, meta.name, r"SigMF schema at global/core:hw \(123 is not of type 'string'\)"
    if case == "two-channels":
        _edit_meta(meta, lambda d: d["global"].update({"core:num_channels": 2}))
        return meta, meta.name, "2 interleaved channels"
    if case == "header-bytes":
        _edit_meta(meta, lambda d: d["captures"][0].update({"core:header_bytes": 44}))
        return meta, meta.name, "non-conforming"
    if case == "bad-datetime":
        _edit_meta(meta, lambda d: d["captures"][0].update({"core:datetime": "2026-13-45T00:00:00Z"}))
        return meta, meta.name, "core:datetime of capture 0 is '2026-13-45T00:00:00Z', not an ISO 8601"
    if case == "not-a-tar":
        bad = tmp_path / "broken.sigmf"
        bad.write_bytes(b"not a tar archive at all" * 40)
        return bad, bad.name, "not a SigMF archive"
    if case == "tar-without-meta":
        bad = tmp_path / "nometa.sigmf"
        with tarfile.open(bad, "w") as tar:
            tar.add(data, arcname="nometa/nometa.sigmf-data")
        return bad, bad.name, "0 .sigmf-meta and 1 .sigmf-data"
    if case == "compressed":
        bad = tmp_path / "packed.sigmf.gz"
        bad.write_bytes(b"\x1f\x8b")
        return bad, bad.name, "compressed SigMF archives"
    raise AssertionError(case)


BAD_CASES = [
    "missing", "missing-data", "not-json", "not-utf8", "not-sigmf", "not-sigmf-list", "ci16_be", "rf32_le",
    "ci16", "cf64_le", "no-datatype", "no-rate", "bad-rate", "no-frequency", "no-captures", "partial-sample",
    "capture-beyond-end", "truncated-data", "annotation-beyond-end", "unsorted", "checksum", "empty", "schema",
    "two-channels", "header-bytes", "bad-datetime", "not-a-tar", "tar-without-meta", "compressed",
]


@pytest.mark.parametrize("case", BAD_CASES)
def test_bad_recordings_raise_recording_error_naming_the_file(tmp_path, case):
    path, name, pattern = _case(tmp_path, case)
    with pytest.raises(RecordingError, match=pattern) as info:
        open_recording(path)
    message = str(info.value)
    assert name in message and "\n" not in message


def test_checksum_mismatch_is_not_checked_when_skipped(tmp_path):
    path, _, _ = _case(tmp_path, "checksum")
    assert open_recording(path, skip_checksum=True).n_captures == 3


# -- physics: a foreign recording measured by the sweep engine ----------------------------------
TONE_CHANNEL_HZ = 97_100_000
TONE_AMPLITUDE = 0.25  # full scale; power A**2 = -12.04 dBFS


def tone_recording(directory: Path, datatype: str, seed: int = 11) -> Path:
    """Three captures at arbitrary centres; capture 1 holds a complex tone on 97.1 MHz.

    Background: white Gaussian noise of total power 1e-6 (-60 dBFS) per capture; for cu8 about
    1.4 LSB rms per component (-38 dBFS), which also dithers the 8-bit quantiser. Either way the
    noise in the tone's channel is over 35 dB below A**2, so the channel power is A**2 within
    0.001 dB.
    """
    rng = np.random.default_rng(seed)
    centers = [88_730_000.0, 96_812_500.0, 103_004_000.0]
    n = 32_768
    noise_rms = 2.0 / 127.5 if datatype == "cu8" else 1e-3
    parts, caps = [], []
    t = np.arange(n) / FS_HZ
    for k, fc in enumerate(centers):
        z = noise_rms * (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / np.sqrt(2)
        if k == 1:
            z = z + TONE_AMPLITUDE * np.exp(2j * np.pi * (TONE_CHANNEL_HZ - fc) * t + 0.3j)
        parts.append(encode(z, datatype))
        caps.append({sigmf.SAMPLE_START_KEY: k * n, sigmf.FREQUENCY_KEY: fc,
                     sigmf.DATETIME_KEY: f"2026-03-01T12:00:0{k}.000Z"})
    return write_foreign(directory, f"tone_{datatype}", datatype, caps, np.concatenate(parts))


@pytest.mark.parametrize("datatype", ["ci16_le", "cf32_le", "cu8"])
def test_foreign_tone_measured_with_parseval_power_and_uncovered_listed(tmp_path, datatype):
    from survey.sweep import plan_for_source, run_sweep

    src = open_recording(tone_recording(tmp_path, datatype))
    channels = tuple(range(87_500_000, 108_000_001, 100_000))  # 100 kHz raster (GE84 Region 1)
    band = BandPlan("test-raster", channels[0], channels[-1], 100_000, channels)
    settings = SweepSettings(band="test-raster")
    plan = plan_for_source(band, src, settings)
    # independent coverage rule (HopPlan docstring): the whole channel inside usable spectrum,
    # clear of the DC guard, for at least one capture
    half_usable = settings.usable_fraction * FS_HZ / 2
    bw2 = settings.channel_bw_hz / 2

    def fits(f, c):
        d = abs(f - round(c))
        return d - bw2 >= settings.dc_guard_hz and d + bw2 <= half_usable

    expected = {f for f in channels if any(fits(f, c) for c in src.fixed_centers_hz)}
    assert set(plan.channels_hz) == expected
    assert set(plan.uncovered_hz) == set(channels) - expected and len(plan.uncovered_hz) > 100
    result = run_sweep(src, plan, settings, "foreign", "antenna")
    assert result.complete and len(result.hops) == 3
    rows = {r.freq_hz: r for r in result.channels}
    assert set(rows) == expected
    tone = rows[TONE_CHANNEL_HZ]
    # Parseval (REFERENCES.md): a complex exponential of amplitude A has power A**2
    assert tone.power_dbfs == pytest.approx(10 * np.log10(TONE_AMPLITUDE**2), abs=0.01)
    assert tone.received
    assert tone.hop_index == 1
    others = [r.power_dbfs for f, r in rows.items() if abs(f - TONE_CHANNEL_HZ) >= 300_000]
    assert max(others) < 10 * np.log10(TONE_AMPLITUDE**2) - 30
