"""Replay of SigMF recordings: each capture segment is one hop at a fixed centre frequency.

A recording is read with the ``sigmf`` reference library (metadata, schema validation); the
SHA-512 checksum is computed here in one streamed pass with progress
(:func:`survey.sources.recording_checks.stream_check`); the samples are taken as **raw bytes**, memory-mapped straight from the data
file (or from inside an uncompressed ``.sigmf`` archive), in their native datatype. sigmf's
autoscale is not used: it scales ``cu8`` as ``(x - 128) / 128`` while the receiver library and
:func:`survey.dsp.to_complex64` use ``(x - 127.5) / 127.5``, and live and replayed samples must
be converted by the same function.

Conventions (SigMF specification 1.2, ``captures`` and ``global`` objects):

* ``core:sample_start`` is the sample index relative to the dataset file (as sigmf-python
  reads it); a capture runs up to the next capture's ``sample_start`` or the end of the data.
  Samples before the first capture belong to no hop and are never read.
* ``fixed_centers_hz`` are the captures' ``core:frequency`` values in capture order.
* ``started_utc`` of a block, in the format of :func:`survey.store.utc_now`, comes from, in
  order of preference:

  1. ``core:datetime`` of the capture (``"capture"``);
  2. the nearest earlier capture that has one, plus the samples in between at the sample rate
     (``"derived"``; a lower bound if the recorder paused between captures);
  3. a ``core:datetime`` in the global object (not in the standard, but written by some
     tools), taken as the time of sample 0 (``"global"``);
  4. the data file's modification time, taken as the end of the recording, minus the samples
     from the capture start to the end of the data (``"file-mtime"``).

  :meth:`RecordingSource.describe` reports which of these was used.

Anything the replay cannot measure correctly raises :class:`~survey.errors.RecordingError`
with a one-line message naming the file and the remedy. sigmf-python only *warns* about a
data file that is not a whole number of samples or that ends before its annotations; here
both are errors, and sigmf's warnings are suppressed so that none escapes.
"""

from __future__ import annotations

import json
import math
import os
import tarfile
import warnings
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path

import jsonschema
import numpy as np
import sigmf
from sigmf.error import SigMFError

from survey.errors import RecordingError
from survey.records import IQBlock
from survey.sources.sigmf_schema import validate_metadata
from survey.sources.recording_checks import (  # noqa: F401 (COMPONENT_DTYPES re-exported)
    CHECK_BLOCK_BYTES, COMPONENT_DTYPES, FEW_AVERAGES, check_fft_fill, check_global, check_layout, stream_check,
)

#: Default most samples measured per capture (hop): longer captures are measured over windows
#: spread evenly across them (see :meth:`RecordingSource.read`), so memory stays bounded.
DEFAULT_MAX_HOP_SAMPLES = 1 << 23

#: Our own metadata namespace in SigMF files (declared in ``core:extensions``).
NAMESPACE = "bandcensus"
#: Version of the fields of our namespace (not the tool version).
NAMESPACE_VERSION = "0.1.0"

_UTC_FORMAT = "%Y-%m-%dT%H:%M:%S.%fZ"  # the format of survey.store.utc_now()
_COMPRESSED_SUFFIXES = (".sigmf.gz", ".sigmf.xz", ".sigmf.zip")
#: Centres within this many Hz of a capture's core:frequency select it (Hop centres are ints).
CENTER_TOLERANCE_HZ = 1.0


def normalize_utc(text: str) -> str:
    """An ISO 8601 / RFC 3339 timestamp as ``YYYY-MM-DDTHH:MM:SS.ffffffZ`` in UTC.

    Accepts a ``Z`` or numeric offset and any number of fractional digits (beyond six are
    truncated); a timestamp without an offset is taken as UTC (SigMF timestamps are UTC).
    Raises ``ValueError`` when ``text`` is not a timestamp.
    """
    if not isinstance(text, str):
        raise ValueError(f"expected an ISO 8601 string, got {text!r}")
    s = text.strip()
    if s.endswith(("z", "Z")):
        s = s[:-1] + "+00:00"
    head, dot, rest = s.partition(".")
    if dot:  # truncate the fraction to microseconds, keep any offset
        digits = len(rest) - len(rest.lstrip("0123456789"))
        s = head + "." + rest[:min(digits, 6)].ljust(6, "0") + rest[digits:]
    dt = datetime.fromisoformat(s)
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=timezone.utc)
    return dt.astimezone(timezone.utc).strftime(_UTC_FORMAT)


def _utc_plus(utc: str, seconds: float) -> str:
    """``utc`` plus ``seconds``; OverflowError past the years 1-9999 (the checks at opening catch it)."""
    dt = datetime.strptime(utc, _UTC_FORMAT).replace(tzinfo=timezone.utc)
    return (dt + timedelta(seconds=seconds)).strftime(_UTC_FORMAT)


@dataclass(frozen=True)
class _Capture:
    """One capture segment: sample range in the data and its centre and start time."""

    index: int
    center_hz: float
    start_sample: int
    n_samples: int
    started_utc: str
    time_source: str


#: Plausible ranges of our namespace's numeric labels (a ppm beyond 1000 is not a receiver's
#: error but a damaged file; seeds are stored as SQLite INTEGER).
_LABEL_RANGES = {"ppm": (-1000, 1000), "seed": (0, 2**63 - 1), "gain_db": (-20.0, 100.0),
                 "channel_bw_hz": (1.0, 1e8)}


_KIND_NAMES = {str: "text", int: "an integer", float: "a number"}


def _short(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _resolve(path: Path) -> tuple[str, Path]:
    """``("pair", meta path)`` or ``("archive", archive path)`` for any accepted spelling."""
    name = path.name
    if name.endswith(_COMPRESSED_SUFFIXES):
        raise RecordingError(
            f"{path}: compressed SigMF archives cannot be memory-mapped; unpack it "
            "(e.g. 'tar -xf') and replay the .sigmf-meta file"
        )
    if name.endswith(".sigmf-collection"):
        raise RecordingError(f"{path}: a SigMF collection holds several recordings; replay one .sigmf-meta of it")
    if name.endswith(".sigmf"):
        return "archive", path
    if name.endswith((".sigmf-meta", ".sigmf-data")):
        return "pair", path.with_name(name.rsplit(".", 1)[0] + ".sigmf-meta")
    meta, archive = path.with_name(name + ".sigmf-meta"), path.with_name(name + ".sigmf")
    if meta.exists() or not archive.exists():
        return "pair", meta
    return "archive", archive


def _load_json(raw: bytes, where: Path) -> dict:
    try:
        meta = json.loads(raw.decode("utf-8"))
    except RecursionError:
        raise RecordingError(
            f"{where}: metadata is nested too deeply to read (thousands of levels of JSON); "
            "give the .sigmf-meta file of a SigMF recording"
        ) from None
    except (UnicodeDecodeError, ValueError) as exc:
        raise RecordingError(
            f"{where}: metadata is not JSON ({exc}); give the .sigmf-meta file of a SigMF recording"
        ) from None
    if not isinstance(meta, dict) or not isinstance(meta.get("global"), dict):
        raise RecordingError(
            f"{where}: not SigMF metadata (no 'global' object); give the .sigmf-meta file of a SigMF recording"
        )
    return meta


def _read_pair(meta_path: Path) -> tuple[dict, Path, int]:
    if not meta_path.is_file():
        raise RecordingError(f"{meta_path}: no such file; check the path (give the .sigmf-meta, .sigmf-data or .sigmf file)")
    meta = _load_json(meta_path.read_bytes(), meta_path)
    data_path = meta_path.with_name(meta_path.name[: -len(".sigmf-meta")] + ".sigmf-data")
    if not data_path.is_file():
        raise RecordingError(
            f"{data_path}: data file missing (metadata {meta_path.name} has no samples to replay); "
            "copy the .sigmf-data file next to its .sigmf-meta"
        )
    return meta, data_path, data_path.stat().st_size


def _read_archive(path: Path) -> tuple[dict, Path, int]:
    if not path.is_file():
        raise RecordingError(f"{path}: no such file; check the path of the SigMF archive")
    try:
        with tarfile.open(path, "r:") as tar:
            members = [m for m in tar.getmembers() if m.isfile()]
            metas = [m for m in members if m.name.endswith(".sigmf-meta")]
            datas = [m for m in members if m.name.endswith(".sigmf-data")]
            if len(metas) != 1 or len(datas) != 1:
                raise RecordingError(
                    f"{path}: archive holds {len(metas)} .sigmf-meta and {len(datas)} .sigmf-data files, "
                    "expected one of each; unpack it and replay one recording"
                )
            with tar.extractfile(metas[0]) as fh:
                raw = fh.read()
            size = datas[0].size
    except tarfile.TarError as exc:
        raise RecordingError(f"{path}: not a SigMF archive ({exc}); give an uncompressed .sigmf tar file") from None
    return _load_json(raw, path), path, size


def _open_with_sigmf(where: Path, verify: bool):
    """Parse, checksum and schema-validate with sigmf, with its warnings kept inside."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            sf = sigmf.fromfile(str(where), skip_checksum=not verify, autoscale=False)
            validate_metadata({"global": sf.get_global_info(), "captures": sf.get_captures(), "annotations": sf.get_annotations()})
    except SigMFError as exc:
        if "hash" in str(exc).lower():
            raise RecordingError(
                f"{where}: checksum (core:sha512) does not match the data; the data was altered or cut "
                "short: re-copy the recording"
            ) from None
        raise RecordingError(f"{where}: sigmf cannot read it ({exc}); check the recording") from None
    except jsonschema.exceptions.ValidationError as exc:
        field = "/".join(str(p) for p in exc.absolute_path) or "top level"
        text = exc.message if len(exc.message) <= 100 else exc.message[:97] + "..."
        raise RecordingError(
            f"{where}: metadata does not follow the SigMF schema at {field} ({text}); fix that field"
        ) from None
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise RecordingError(f"{where}: cannot read the recording ({exc}); check the files") from None
    return sf


def _capture_times(meta: dict, starts: list[int], n_total: int, rate: float, data_path: Path,
                   where: Path) -> list[tuple[str, str]]:
    captures = meta["captures"]

    def parse(value, what):
        try:
            return normalize_utc(value)
        except ValueError:
            raise RecordingError(
                f"{where}: {what} is {value!r}, not an ISO 8601 UTC time; write it as 2025-01-31T12:00:00.000Z"
            ) from None

    out: list[tuple[str, str]] = []
    last: tuple[str, int] | None = None  # (time, sample) of the latest capture with a datetime
    global_dt = meta["global"].get(sigmf.DATETIME_KEY)
    global_utc = None
    mtime_end = None
    for k, (cap, start) in enumerate(zip(captures, starts)):
        if cap.get(sigmf.DATETIME_KEY) is not None:
            utc = parse(cap[sigmf.DATETIME_KEY], f"core:datetime of capture {k}")
            last = (utc, start)
            out.append((utc, "capture"))
        elif last is not None:
            out.append((_utc_plus(last[0], (start - last[1]) / rate), "derived"))
        elif global_dt is not None:
            global_utc = global_utc or parse(global_dt, "global core:datetime")
            out.append((_utc_plus(global_utc, start / rate), "global"))
        else:
            if mtime_end is None:
                mtime_end = datetime.fromtimestamp(os.stat(data_path).st_mtime, timezone.utc).strftime(_UTC_FORMAT)
            out.append((_utc_plus(mtime_end, -(n_total - start) / rate), "file-mtime"))
    return out


class RecordingSource:
    """A SigMF recording replayed hop by hop through the :class:`~survey.sources.base.IQSource` protocol.

    Build it with :func:`open_recording`. ``tune(center_hz)`` selects the next capture (in
    capture order, wrapping round once) whose ``core:frequency`` is ``center_hz`` (within
    :data:`CENTER_TOLERANCE_HZ`); ``read`` then returns its raw samples, memory-mapped, never
    copied. Consecutive reads after one ``tune`` continue through the capture, like a receiver.
    """

    kind = "recording"

    def __init__(self, path: Path, data_path: Path, data_offset: int, datatype: str, sample_rate_hz: float,
                 captures: tuple[_Capture, ...], meta: dict, checksum_verified: bool, container: str,
                 max_hop_samples: int = DEFAULT_MAX_HOP_SAMPLES, window_samples: int = 1 << 17):
        self.path = path
        self.max_hop_samples = int(max_hop_samples)
        self.window_samples = int(window_samples)
        self._data_path = data_path
        self._data_offset = int(data_offset)
        self._datatype = datatype
        self._rate = sample_rate_hz
        self._captures = captures
        self._meta = meta
        self._checksum_verified = checksum_verified
        self._container = container
        dtype = COMPONENT_DTYPES[datatype]
        n_components = 2 * (captures[-1].start_sample + captures[-1].n_samples)
        self._map: np.ndarray | None = np.memmap(data_path, dtype=dtype, mode="r", offset=data_offset,
                                                 shape=(n_components,))
        self._skip: dict[int, int] = {}  # capture index -> samples left out at its start
        self._next = 0           # capture index where the next tune() starts looking
        self._current: int | None = None
        self._position = 0       # samples already read from the current capture

    # -- protocol ------------------------------------------------------------------------
    @property
    def sample_rate_hz(self) -> float:
        """``core:sample_rate`` in samples per second."""
        return self._rate

    @property
    def fixed_centers_hz(self) -> tuple[float, ...]:
        """``core:frequency`` of each capture in capture order (Hz)."""
        return tuple(c.center_hz for c in self._captures)

    @property
    def datatype(self) -> str:
        """SigMF datatype of the samples (one of :data:`survey.dsp.SUPPORTED_DATATYPES`)."""
        return self._datatype

    @property
    def n_captures(self) -> int:
        """Number of capture segments (hops)."""
        return len(self._captures)

    def capture_lengths(self) -> tuple[int, ...]:
        """Number of complex samples measured in each capture (after any skipped start), in order."""
        return tuple(c.n_samples - self._skip.get(c.index, 0) for c in self._captures)

    def skip_start(self, skip_s: float | None = None, *, max_opening: int = 1 << 21) -> list[str]:
        """Leave out each capture's start-up transient; returns one note per capture affected.

        ``skip_s`` None: detect it (:func:`survey.settling.detect_startup_transient` on the
        first quarter of each capture, at most ``max_opening`` samples); a number: skip that
        many seconds of every capture (``--skip-ms``), 0 for none. A capture is never skipped
        below half its length.
        """
        from survey.dsp import to_complex64
        from survey.settling import detect_startup_transient

        if self._map is None:
            raise RecordingError(f"{self.path}: recording is closed; open it again")
        notes: list[str] = []
        self._skip = {}
        for cap in self._captures:
            if skip_s is not None:
                n = int(round(float(skip_s) * self._rate))
                if n <= 0:
                    continue
                if n > cap.n_samples // 2:
                    raise RecordingError(
                        f"{self.path}: --skip-ms {1e3 * float(skip_s):g} leaves less than half of capture "
                        f"{cap.index} ({1e3 * cap.n_samples / self._rate:.1f} ms); skip less"
                    )
                self._skip[cap.index] = n
                notes.append(f"first {1e3 * n / self._rate:.2f} ms of capture {cap.index} skipped by hand")
                continue
            opening = min(cap.n_samples // 4, max_opening)
            raw = np.asarray(self._map[2 * cap.start_sample: 2 * (cap.start_sample + opening)])
            found = detect_startup_transient(to_complex64(raw, self._datatype))
            if found is not None:
                self._skip[cap.index] = found.n_samples
                notes.append(
                    f"start-up transient left out of capture {cap.index}: first {found.n_samples} samples "
                    f"({1e3 * found.n_samples / self._rate:.2f} ms), power off by {found.departure_db:.1f} dB "
                    f"against a scatter of {found.scatter_db:.2f} dB"
                )
        return notes

    def check_fft(self, fft_size: int, few_averages: int = FEW_AVERAGES) -> list[str]:
        """Check that every capture can fill the FFT; return warnings for captures with few averages.

        Raises :class:`RecordingError` naming the capture and the largest FFT size that fits
        ("the recording holds 2048 samples; use --fft-size 1024 or less" style). A capture
        giving fewer than ``few_averages`` Welch segments is measured, with a warning that
        states the scatter of each spectrum bin: a Welch average of ``K_eff`` independent
        periodograms of Gaussian noise is ``S chi2(2 K_eff) / (2 K_eff)`` [Welch 1967], so one
        standard deviation is ``10 log10(1 + 1/sqrt(K_eff))`` dB.
        """
        return check_fft_fill(self.path, [(c.index, min(c.n_samples - self._skip.get(c.index, 0), self.max_hop_samples))
                                          for c in self._captures], fft_size, few_averages)

    def describe(self) -> dict:
        """File description for the ``runs`` table (JSON-serialisable)."""
        g = self._meta["global"]
        return {
            "path": str(self.path),
            "container": self._container,
            "datatype": self._datatype,
            "sample_rate_hz": self._rate,
            "hw": g.get(sigmf.HW_KEY),
            "recorder": g.get(sigmf.RECORDER_KEY),
            "description": g.get(sigmf.DESCRIPTION_KEY),
            "sha512": sigmf.SHA512_KEY in g,
            "checksum_verified": self._checksum_verified,
            "n_captures": len(self._captures),
            "n_samples": sum(c.n_samples for c in self._captures),
            "time_sources": sorted({c.time_source for c in self._captures}),
        }

    def metadata_labels(self) -> dict:
        """Our namespace's labels when present (None otherwise), to default the replay's labels.

        Keys: ``configuration``, ``input``, ``band`` (str), ``gain_db``, ``channel_bw_hz``
        (float), ``ppm``, ``seed`` (int). Read from the global object, ``bandcensus:<key>``.
        """
        g = self._meta["global"]
        kinds = {"configuration": str, "input": str, "band": str, "gain_db": float,
                 "channel_bw_hz": float, "ppm": int, "seed": int}
        out: dict = {}
        for key, kind in kinds.items():
            value = g.get(f"{NAMESPACE}:{key}")
            ok = value is None or (
                isinstance(value, str) if kind is str
                else (not isinstance(value, bool) and isinstance(value, int if kind is int else (int, float)))
            )
            if not ok:
                raise RecordingError(
                    f"{self.path}: {NAMESPACE}:{key} is {_short(value)}, expected {_KIND_NAMES[kind]}; fix or remove it"
                )
            if value is not None and key in _LABEL_RANGES:
                low, high = _LABEL_RANGES[key]
                if not (math.isfinite(float(value)) and low <= value <= high):
                    raise RecordingError(
                        f"{self.path}: {NAMESPACE}:{key} is {_short(value)}, outside {low:g} to {high:g}; "
                        "fix or remove it"
                    )
            out[key] = None if value is None else kind(value)
        return out

    def tune(self, center_hz: float) -> None:
        """Select the next capture (in order, wrapping round) whose centre is ``center_hz`` (Hz)."""
        n = len(self._captures)
        for step in range(n):
            k = (self._next + step) % n
            if abs(self._captures[k].center_hz - float(center_hz)) <= CENTER_TOLERANCE_HZ:
                self._current, self._position, self._next = k, self._skip.get(k, 0), k + 1
                return
        centres = ", ".join(f"{c:.0f}" for c in sorted(set(self.fixed_centers_hz)))
        raise RecordingError(
            f"{self.path}: no capture is centred at {float(center_hz):.0f} Hz (captures: {centres} Hz); "
            "plan the hops from the recording's capture centres"
        )

    def read(self, n_samples: int | None) -> IQBlock:
        """Raw samples of the selected capture, in its native datatype.

        ``None`` gives the rest of the capture (all of it after ``tune``); an int gives the next
        ``n_samples`` and raises :class:`RecordingError` if the capture has fewer left.
        Memory stays bounded whatever the capture's length: a request longer than
        ``max_hop_samples`` returns that many samples taken as equal windows of
        ``window_samples`` spread evenly over the requested span (a copy; shorter requests
        are memory-mapped views). Welch segments that straddle two windows are about
        ``fft_size / window_samples`` of all (under 2 % at the defaults) and only see a phase
        step, so the averaged PSD level is unchanged for noise and stations (common practice,
        no source).
        """
        if self._map is None:
            raise RecordingError(f"{self.path}: recording is closed; open it again")
        if self._current is None:
            raise RecordingError(f"{self.path}: no capture selected; call tune(center_hz) before read()")
        cap = self._captures[self._current]
        left = cap.n_samples - self._position
        if n_samples is None:
            n = left
        else:
            n = int(n_samples)
            if n <= 0 or n > left:
                raise RecordingError(
                    f"{self.path}: capture {cap.index} has {left} samples left but {n} were asked for; "
                    "read the whole capture or a shorter part"
                )
        first = cap.start_sample + self._position
        started = cap.started_utc if self._position == 0 else _utc_plus(cap.started_utc, self._position / self._rate)
        self._position += n
        if n <= self.max_hop_samples:
            raw = np.asarray(self._map[2 * first: 2 * (first + n)])
        else:
            width = min(self.window_samples, self.max_hop_samples)
            count = max(1, self.max_hop_samples // width)
            offsets = np.linspace(0, n - width, count).astype(np.int64)
            dtype = self._map.dtype
            raw = np.empty(2 * width * count, dtype=dtype)
            # Plain reads, not the memory map: pages of a large file stay out of this process.
            with open(self._data_path, "rb") as fh:
                for k, off in enumerate(offsets):
                    fh.seek(self._data_offset + 2 * (first + int(off)) * dtype.itemsize)
                    got = fh.readinto(memoryview(raw[2 * width * k: 2 * width * (k + 1)]).cast("B"))
                    if got != 2 * width * dtype.itemsize:
                        raise RecordingError(f"{self.path}: data ends early in capture {cap.index}; "
                                             "re-copy the recording")
        return IQBlock(center_hz=cap.center_hz, sample_rate_hz=self._rate, datatype=self._datatype,
                       raw=raw, started_utc=started)

    def close(self) -> None:
        """Drop the memory map (blocks already returned stay valid). Safe to call twice."""
        self._map = None

    def __enter__(self) -> "RecordingSource":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def open_recording(path: str | os.PathLike, *, skip_checksum: bool = False, progress=None,
                   max_hop_samples: int = DEFAULT_MAX_HOP_SAMPLES) -> RecordingSource:
    """Open a SigMF recording for replay.

    Parameters
    ----------
    path : str or PathLike
        The ``.sigmf-meta`` file, the ``.sigmf-data`` file, their common base name, or an
        uncompressed ``.sigmf`` archive.
    skip_checksum : bool
        Do not verify ``core:sha512``. Verifying reads the whole data once, in blocks of
        :data:`CHECK_BLOCK_BYTES` (time: ``tests/benchmarks/bench_recording.py``; memory:
        ``tests/benchmarks/bench_replay_memory.py``). A recording without ``core:sha512`` is
        never hashed (there is nothing to compare with).
    progress : callable, optional
        ``progress(done_bytes, total_bytes)`` during the pass over the data (checksum and, for
        float datatypes, the check that every sample is finite; one block of
        :data:`CHECK_BLOCK_BYTES` in memory at a time).
    max_hop_samples : int
        Most samples measured per capture (see :meth:`RecordingSource.read`).

    Returns
    -------
    RecordingSource

    Raises
    ------
    RecordingError
        Missing file, not JSON, not SigMF, unsupported datatype, no sample rate, captures
        without frequency, a data size that is not whole samples or shorter than the metadata
        claims, checksum mismatch, empty recording. The message names the file and the remedy.

    References
    ----------
    SigMF specification 1.2 (``global``, ``captures``, ``core:sha512``); sigmf-python 1.14
    (``sigmf.fromfile``, ``SigMFFile.validate``).
    """
    given = Path(os.fspath(path))
    container, where = _resolve(given)
    if container == "archive":
        meta, data_path, data_bytes = _read_archive(where)
    else:
        meta, data_path, data_bytes = _read_pair(where)
    datatype, rate = check_global(meta, where)
    sample_bytes = 2 * COMPONENT_DTYPES[datatype].itemsize
    n_total, starts, centers = check_layout(meta, where, data_bytes, sample_bytes)
    verify = not skip_checksum and sigmf.SHA512_KEY in meta["global"]
    sf = _open_with_sigmf(where, False)  # the checksum is computed below, streamed, with progress
    data_offset = int(getattr(sf, "data_offset", 0) or 0)
    stream_check(where, data_path, data_offset, data_bytes, datatype,
                  meta["global"].get(sigmf.SHA512_KEY) if verify else None, starts, progress)
    ends = starts[1:] + [n_total]
    try:
        times = _capture_times(meta, starts, n_total, rate, data_path, where)
        for (utc, _), start, end in zip(times, starts, ends):
            _utc_plus(utc, (end - start) / rate)  # every sample's time must be a date
    except (OverflowError, ValueError) as exc:
        raise RecordingError(
            f"{where}: a capture's time runs outside the calendar ({exc}); fix core:datetime "
            "(e.g. 2025-01-31T12:00:00.000Z)"
        ) from None
    captures = tuple(
        _Capture(k, centers[k], starts[k], ends[k] - starts[k], times[k][0], times[k][1])
        for k in range(len(starts))
    )
    return RecordingSource(where, data_path, data_offset, datatype, rate, captures, meta, verify, container,
                           max_hop_samples=max_hop_samples)
