"""SigMF writer for the raw IQ of one sweep: one capture segment per hop.

The bytes of every hop are streamed, unchanged, to ``<base>.sigmf-data`` in the datatype the
source delivered (``cu8`` for the receiver). The metadata follows SigMF 1.2: ``core:datatype``,
``core:sample_rate``, ``core:hw``, ``core:recorder``, ``core:sha512`` (computed while writing),
one capture per hop with ``core:frequency``, ``core:sample_start`` and ``core:datetime``, and our
own fields under one declared namespace, ``bandcensus:``:

=========================== =============================================
``bandcensus:configuration`` what is in the chain (the user's label)
``bandcensus:input``          what the receiver's input sees
``bandcensus:gain_db``        receiver gain in dB (omitted for automatic gain)
``bandcensus:ppm``            frequency correction in ppm
``bandcensus:seed``           random seed of a simulated scene (omitted otherwise)
``bandcensus:band``           band plan name
``bandcensus:channel_bw_hz``  channel integration bandwidth in Hz
=========================== =============================================

Crash safety: data and metadata are written under temporary names in the target folder and
moved into place with :func:`os.replace` (atomic on POSIX), data first, then metadata. A crash
can leave a data file without metadata, never metadata that points at a truncated data file.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import warnings
from pathlib import Path

import jsonschema
import numpy as np
import sigmf

from survey.version import __version__
from survey.errors import RecordingError
from survey.records import IQBlock
from survey.sources.recording import COMPONENT_DTYPES, NAMESPACE, NAMESPACE_VERSION, normalize_utc


def _fsync_dir(directory: Path) -> None:
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


class SweepRecorder:
    """Keep the raw blocks of one sweep as a SigMF recording (a :class:`~survey.sweep.BlockSink`).

    Parameters
    ----------
    directory : str or Path
        Folder for the recording (created if missing).
    base_name : str
        File name without extension; ``<base>.sigmf-data`` and ``<base>.sigmf-meta`` must not
        exist yet.
    configuration, input : str
        The sweep's labels.
    gain_db : float or None
        Receiver gain in dB; None for automatic gain (field omitted).
    ppm : int
        Frequency correction in ppm.
    device : str
        Receiver description, stored as ``core:hw`` (omitted when empty).
    seed : int or None
        Random seed of a simulated scene; None for real receivers (field omitted).
    band : str
        Band plan name.
    channel_bw_hz : float
        Channel integration bandwidth in Hz.
    description : str
        Free text for ``core:description`` (omitted when empty).
    """

    def __init__(self, directory: str | os.PathLike, base_name: str, *, configuration: str, input: str,
                 band: str, channel_bw_hz: float, gain_db: float | None = None, ppm: int = 0,
                 device: str = "", seed: int | None = None, description: str = ""):
        self.directory = Path(directory)
        if not base_name or os.sep in base_name or base_name.endswith((".sigmf-data", ".sigmf-meta", ".sigmf")):
            raise RecordingError(
                f"recording base name {base_name!r} is invalid; give a plain file name without extension"
            )
        self.base_name = base_name
        self.data_path = self.directory / f"{base_name}.sigmf-data"
        self.meta_path = self.directory / f"{base_name}.sigmf-meta"
        for p in (self.data_path, self.meta_path):
            if p.exists():
                raise RecordingError(f"{p} already exists; choose another recording name or folder")
        if isinstance(gain_db, bool) or (gain_db is not None and not math.isfinite(float(gain_db))):
            raise RecordingError(f"gain_db {gain_db!r} is not a number; give the receiver gain in dB or None")
        self._labels: dict = {
            "configuration": str(configuration),
            "input": str(input),
            "gain_db": None if gain_db is None else float(gain_db),
            "ppm": int(ppm),
            "seed": None if seed is None else int(seed),
            "band": str(band),
            "channel_bw_hz": float(channel_bw_hz),
        }
        self._device = device if isinstance(device, str) else json.dumps(device, sort_keys=True)
        self._description = description
        token = f".{os.getpid()}-{id(self):x}.partial"
        self._tmp_data = self.directory / f".{base_name}.sigmf-data{token}"
        self._tmp_meta = self.directory / f".{base_name}.sigmf-meta{token}"
        self._fh = None
        self._hash = hashlib.sha512()
        self._captures: list[tuple[int, float, str]] = []  # (sample_start, center_hz, started_utc)
        self._n_samples = 0
        self._datatype: str | None = None
        self._rate: float | None = None
        self._data_placed = False
        self._finished = False

    @property
    def n_captures(self) -> int:
        """Number of hops recorded so far."""
        return len(self._captures)

    def add_block(self, block: IQBlock) -> None:
        """Append one hop's raw samples as a new capture segment.

        Raises :class:`RecordingError` when the block's datatype or rate differs from the first
        block's, its datatype is not supported, or its array does not match its datatype.
        """
        if self._finished:
            raise RecordingError(f"{self.meta_path} is already finished; start a new recorder for the next sweep")
        dtype = COMPONENT_DTYPES.get(block.datatype)
        if dtype is None:
            raise RecordingError(
                f"{self.data_path}: datatype {block.datatype!r} cannot be recorded; supported: "
                f"{', '.join(COMPONENT_DTYPES)}"
            )
        raw = np.asarray(block.raw)
        if raw.dtype != dtype or raw.size % 2:
            raise RecordingError(
                f"{self.data_path}: block at {block.center_hz:.0f} Hz holds {raw.size} {raw.dtype} values; "
                f"{block.datatype} needs an even number of interleaved {dtype} values (fix the source)"
            )
        if self._datatype is None:
            self._datatype, self._rate = block.datatype, float(block.sample_rate_hz)
        elif block.datatype != self._datatype or not math.isclose(block.sample_rate_hz, self._rate, rel_tol=1e-12):
            raise RecordingError(
                f"{self.data_path}: block at {block.center_hz:.0f} Hz is {block.datatype} at "
                f"{block.sample_rate_hz:.0f} S/s but the recording is {self._datatype} at {self._rate:.0f} S/s; "
                "keep one datatype and sample rate per sweep"
            )
        try:
            started = normalize_utc(block.started_utc)
        except ValueError:
            raise RecordingError(
                f"{self.data_path}: block time {block.started_utc!r} is not an ISO 8601 UTC time (fix the source)"
            ) from None
        buf = np.ascontiguousarray(raw).view(np.uint8)
        try:
            if self._fh is None:
                self.directory.mkdir(parents=True, exist_ok=True)
                self._fh = open(self._tmp_data, "xb")
            self._fh.write(buf.data)
        except OSError as exc:
            raise RecordingError(f"cannot write {self.data_path}: {exc}; free disk space or choose another folder") from exc
        self._hash.update(buf.data)
        self._captures.append((self._n_samples, float(block.center_hz), started))
        self._n_samples += raw.size // 2

    def _metadata(self) -> "sigmf.SigMFFile":
        g = {
            sigmf.DATATYPE_KEY: self._datatype,
            sigmf.SAMPLE_RATE_KEY: self._rate,
            sigmf.RECORDER_KEY: f"bandcensus {__version__}",
            sigmf.SHA512_KEY: self._hash.hexdigest(),
            sigmf.EXTENSIONS_KEY: [{"name": NAMESPACE, "version": NAMESPACE_VERSION, "optional": True}],
        }
        if self._device:
            g[sigmf.HW_KEY] = self._device
        if self._description:
            g[sigmf.DESCRIPTION_KEY] = self._description
        for key, value in self._labels.items():
            if value is not None:
                g[f"{NAMESPACE}:{key}"] = value
        meta = sigmf.SigMFFile(global_info=g)
        for start, center_hz, started in self._captures:
            # a fresh dict per capture: sigmf keeps and mutates the dict it is given
            meta.add_capture(start, metadata={sigmf.FREQUENCY_KEY: center_hz, sigmf.DATETIME_KEY: started})
        return meta

    def finish(self) -> Path | None:
        """Close the data, write and validate the metadata; returns the ``.sigmf-meta`` path.

        Returns None (and writes nothing) when no block was added. On any failure the partial
        files are removed (as by :meth:`abort`) before the error is raised. The metadata is checked with
        sigmf's validator (``SigMFFile.validate``, the SigMF JSON schema) before it is written.
        """
        if self._finished:
            return self.meta_path if self._captures else None
        if self._fh is None:
            self._finished = True
            return None
        try:
            self._fh.flush()
            os.fsync(self._fh.fileno())
            self._fh.close()
            self._fh = None
            meta = self._metadata()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                meta.validate()
            for p in (self.data_path, self.meta_path):
                if p.exists():
                    raise RecordingError(f"{p} appeared while recording; choose another recording name")
            os.replace(self._tmp_data, self.data_path)
            self._data_placed = True
            with open(self._tmp_meta, "x", encoding="utf-8") as fh:
                meta.dump(fh, pretty=True)
                fh.write("\n")
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(self._tmp_meta, self.meta_path)
            _fsync_dir(self.directory)
        except jsonschema.exceptions.ValidationError as exc:
            self.abort()
            raise RecordingError(f"{self.meta_path}: metadata fails the SigMF schema ({exc.message})") from exc
        except OSError as exc:
            self.abort()
            raise RecordingError(f"cannot write {self.meta_path}: {exc}; free disk space or choose another folder") from exc
        except BaseException:
            self.abort()
            raise
        self._finished = True
        return self.meta_path

    def abort(self) -> None:
        """Close and remove every file of an unfinished recording. Safe to call twice."""
        if self._fh is not None:
            try:
                self._fh.close()
            except OSError:
                pass
            self._fh = None
        paths = [self._tmp_data, self._tmp_meta]
        if self._data_placed and not self._finished:
            paths.append(self.data_path)
        for p in paths:
            try:
                p.unlink()
            except FileNotFoundError:
                pass
        self._finished = True

    def __enter__(self) -> "SweepRecorder":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        """Finish on a normal exit, abort on an exception."""
        if exc_type is None:
            self.finish()
        else:
            self.abort()
