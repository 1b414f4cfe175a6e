"""Checks of a SigMF recording before anything is measured or written (used by replay).

* :func:`check_global` and :func:`check_layout`: the metadata (datatype, rate, channels,
  captures, sizes, annotations), SigMF specification 1.2.
* :func:`stream_check`: one bounded-memory pass over the data: SHA-512 (``core:sha512``) and,
  for float data, every sample finite; with a progress callback.
* :func:`check_fft_fill`: every capture can fill the FFT; few averages give a warning.

Every failure is a :class:`~survey.errors.RecordingError` naming the file and the remedy.
"""

from __future__ import annotations

import bisect
import hashlib
import math
from pathlib import Path

import numpy as np
import sigmf

from survey.dsp import DEFAULT_OVERLAP, SUPPORTED_DATATYPES, welch_effective_averages
from survey.errors import RecordingError

#: numpy dtype of one interleaved component (I or Q) for each supported SigMF datatype.
COMPONENT_DTYPES: dict[str, np.dtype] = {
    "cu8": np.dtype(np.uint8),
    "ci8": np.dtype(np.int8),
    "ci16_le": np.dtype("<i2"),
    "cf32_le": np.dtype("<f4"),
}

_NCD_KEYS = ("core:dataset", "core:trailing_bytes")


def _supported_datatypes() -> tuple[str, ...]:
    return tuple(d for d in SUPPORTED_DATATYPES if d in COMPONENT_DTYPES)


def _check_number(value, what: str, where: Path, remedy: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise RecordingError(f"{where}: {what} is {value!r}, not a number; {remedy}")
    return float(value)


def check_global(meta: dict, where: Path) -> tuple[str, float]:
    g = meta["global"]
    supported = _supported_datatypes()
    datatype = g.get(sigmf.DATATYPE_KEY)
    if datatype not in supported:
        raise RecordingError(
            f"{where}: datatype {datatype!r} is not supported; supported: {', '.join(supported)} "
            "(convert the recording to one of them)"
        )
    if g.get(sigmf.NUM_CHANNELS_KEY, 1) != 1:
        raise RecordingError(
            f"{where}: {g.get(sigmf.NUM_CHANNELS_KEY)} interleaved channels; only single-channel recordings "
            "replay (split the channels into separate recordings)"
        )
    for key in _NCD_KEYS:
        if g.get(key):
            raise RecordingError(
                f"{where}: non-conforming dataset ({key}); convert it to a conforming .sigmf-data file"
            )
    if sigmf.SAMPLE_RATE_KEY not in g:
        raise RecordingError(
            f"{where}: core:sample_rate is missing, so frequencies cannot be known; add it to the global object"
        )
    rate = _check_number(g[sigmf.SAMPLE_RATE_KEY], "core:sample_rate", where, "set it in samples per second")
    if rate <= 0:
        raise RecordingError(f"{where}: core:sample_rate is {rate!r}; set a positive rate in samples per second")
    return datatype, rate


def check_layout(meta: dict, where: Path, data_bytes: int, sample_bytes: int) -> tuple[int, list[int], list[float]]:
    """Whole samples, captures with centres and starts inside the data, annotations inside it."""
    captures = meta.get("captures")
    if not isinstance(captures, list) or not captures:
        raise RecordingError(
            f"{where}: no capture segments, so no centre frequency is known; add captures with core:frequency"
        )
    if data_bytes == 0:
        raise RecordingError(f"{where}: the recording is empty (0 bytes of samples); record again")
    n_total, remainder = divmod(data_bytes, sample_bytes)
    if remainder:
        raise RecordingError(
            f"{where}: data is {data_bytes} bytes, not a whole number of {sample_bytes}-byte samples "
            "(file cut short or wrong datatype); re-copy the recording or fix core:datatype"
        )
    starts, centers = [], []
    for k, cap in enumerate(captures):
        if not isinstance(cap, dict) or sigmf.FREQUENCY_KEY not in cap:
            raise RecordingError(
                f"{where}: capture {k} has no core:frequency, so its channels are unknown; add the centre "
                "frequency to every capture"
            )
        if cap.get("core:header_bytes"):
            raise RecordingError(
                f"{where}: capture {k} has core:header_bytes (non-conforming dataset); convert it to a "
                "conforming .sigmf-data file"
            )
        centers.append(_check_number(cap[sigmf.FREQUENCY_KEY], f"core:frequency of capture {k}", where,
                                     "set it in Hz"))
        start = cap.get(sigmf.SAMPLE_START_KEY)
        if isinstance(start, bool) or not isinstance(start, int) or start < 0:
            raise RecordingError(f"{where}: capture {k} has core:sample_start {start!r}; set a sample index >= 0")
        if starts and start <= starts[-1]:
            raise RecordingError(
                f"{where}: capture {k} starts at sample {start}, not after capture {k - 1} ({starts[-1]}); "
                "captures must be sorted and non-empty"
            )
        if start >= n_total:
            raise RecordingError(
                f"{where}: data ends at sample {n_total} but capture {k} starts at sample {start}: "
                "was the copy cut short? re-copy the .sigmf-data file"
            )
        starts.append(start)
    for k, ann in enumerate(meta.get("annotations") or []):
        if not isinstance(ann, dict):
            continue  # the schema check reports it
        start, count = ann.get(sigmf.SAMPLE_START_KEY, 0), ann.get(sigmf.SAMPLE_COUNT_KEY, 0)
        if not (isinstance(start, int) and isinstance(count, int)):
            continue  # the schema check reports it
        end = start + count
        if end > n_total:
            raise RecordingError(
                f"{where}: data ends at sample {n_total} but annotation {k} reaches sample {end}: "
                "was the copy cut short? re-copy the .sigmf-data file"
            )
    return n_total, starts, centers


#: Fewer Welch segments than this per capture give a warning with the stated uncertainty
#: (common practice, no source: below ~8 averages the bin scatter exceeds 1.3 dB).
FEW_AVERAGES = 8
#: Bytes read at a time by the checksum and sample check (bounded memory whatever the size).
CHECK_BLOCK_BYTES = 1 << 24
#: Default most samples measured per capture (hop): longer captures are measured over windows
#: spread evenly across them (see :meth:`RecordingSource.read`), so memory stays bounded.
DEFAULT_MAX_HOP_SAMPLES = 1 << 23


def stream_check(where: Path, data_path: Path, data_offset: int, data_bytes: int, datatype: str,
                  expected_sha512: str | None, starts: list[int], progress=None) -> None:
    """One pass over the data in blocks: SHA-512 (when expected) and, for float data, every
    sample finite. Memory: one block. ``progress(done_bytes, total_bytes)`` after each block."""
    digest = hashlib.sha512() if expected_sha512 else None
    floating = COMPONENT_DTYPES[datatype].kind == "f"
    if digest is None and not floating:
        return
    sample_bytes = 2 * COMPONENT_DTYPES[datatype].itemsize
    done = 0
    with open(data_path, "rb") as fh:
        fh.seek(data_offset)
        while done < data_bytes:
            buf = fh.read(min(CHECK_BLOCK_BYTES, data_bytes - done))
            if not buf:
                raise RecordingError(f"{where}: data ends after {done} of {data_bytes} bytes; re-copy the recording")
            if digest is not None:
                digest.update(buf)
            if floating:
                values = np.frombuffer(buf, dtype=COMPONENT_DTYPES[datatype])
                finite = np.isfinite(values)
                if not finite.all():
                    sample = (done + int(np.argmin(finite)) * values.itemsize) // sample_bytes
                    capture = max(0, bisect.bisect_right(starts, sample) - 1)
                    raise RecordingError(
                        f"{where}: sample {sample} (capture {capture}) is NaN or infinite, so no power can be "
                        "measured; cut the damaged part out of the recording or record again"
                    )
            done += len(buf)
            if progress is not None:
                progress(done, data_bytes)
    if digest is not None and digest.hexdigest() != str(expected_sha512).lower():
        raise RecordingError(
            f"{where}: checksum (core:sha512) does not match the data; the data was altered or cut "
            "short: re-copy the recording"
        )


def check_fft_fill(where: Path, lengths: list[tuple[int, int]], fft_size: int,
                   few_averages: int = FEW_AVERAGES) -> list[str]:
    """Captures ``(index, samples measured)`` against the FFT: RecordingError when one cannot fill
    it (naming the largest size that fits), warnings with the Welch scatter for few averages.
    See :meth:`survey.sources.recording.RecordingSource.check_fft`."""
    fft_size = int(fft_size)
    few: list[tuple[int, int, int]] = []  # (capture index, segments, samples)
    for index, n in lengths:
        if n < fft_size:
            fits = 1 << (max(n, 1).bit_length() - 1)
            if fits < 64:
                raise RecordingError(
                    f"{where}: capture {index} holds only {n} samples, too few to measure "
                    "(at least 64); remove that capture from the metadata"
                )
            raise RecordingError(
                f"{where}: capture {index} holds {n} samples; use --fft-size {fits} or less"
            )
        step = max(1, fft_size - int(round(DEFAULT_OVERLAP * fft_size)))  # as survey.dsp.averaged_psd
        segments = 1 + (n - fft_size) // step
        if segments < few_averages:
            few.append((index, segments, n))
    if not few:
        return []
    worst = min(few, key=lambda item: item[1])
    k_eff = welch_effective_averages(worst[2], fft_size)
    sigma_db = 10.0 * math.log10(1.0 + 1.0 / math.sqrt(k_eff))
    which = f"capture {few[0][0]}" if len(few) == 1 else f"{len(few)} of {len(lengths)} captures"
    return [
        f"{where}: {which} give{'s' if len(few) == 1 else ''} only {worst[1]} FFT averages at fft size "
        f"{fft_size}: each spectrum bin scatters by about {sigma_db:.1f} dB (1 sigma), so P and N are "
        f"uncertain (use --fft-size {max(64, fft_size // 4)} for more averages)"
    ]
