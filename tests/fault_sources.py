"""Synthetic and fault-injecting IQ sources for tests and benchmarks (no hardware).

* :class:`NoiseSource` delivers seeded white Gaussian noise as ``cu8`` (optionally paced at
  real time with a retune delay, for the overhead benchmark).
* :class:`FaultFactory` builds, in the watchdog's child process, a :class:`FaultySource` that
  unplugs mid-read, stalls, short-reads, fails to tune or dies; or is BUSY on reopening. The
  number of openings is counted in a file, because every reopening happens in a new process.
* :class:`FakeDriverFactory` builds the real :class:`~survey.sources.rtl.RtlSource` on the
  librtlsdr stub of :mod:`fakes_driver`, so driver-level failures (``LibUSBError`` -4, a read
  that never returns) travel through the whole stack.
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from survey.records import IQBlock
from survey.sources.rtl import ReceiverFault


def _utc() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


class NoiseSource:
    """White Gaussian noise of known power, ``cu8``; a tunable stand-in for a receiver.

    ``noise_rms`` is the standard deviation of each of I and Q in ADC counts. With
    ``pace=True``, ``read`` takes ``n / sample_rate_hz`` seconds and ``tune`` ``retune_s``
    seconds plus the settle time, as a live receiver does.
    """

    kind = "simulated"

    def __init__(self, sample_rate_hz: float = 2_400_000.0, seed: int = 1, noise_rms: float = 8.0,
                 pace: bool = False, retune_s: float = 0.0, settle_s: float = 0.0):
        rng = np.random.default_rng(seed)
        self._rate = float(sample_rate_hz)
        self._pool = np.clip(np.round(127.5 + noise_rms * rng.standard_normal(1 << 21)), 0, 255).astype(np.uint8)
        self._rng = rng
        self.pace = pace
        self.retune_s = retune_s
        self.settle_s = settle_s
        self._center = None
        self.tunes = 0

    @property
    def sample_rate_hz(self) -> float:
        return self._rate

    @property
    def fixed_centers_hz(self):
        return None

    def describe(self) -> dict:
        return {"kind": self.kind, "synthetic": "white noise", "settle_s": self.settle_s}

    def tune(self, center_hz: float) -> None:
        if self.pace:
            time.sleep(self.retune_s + self.settle_s)
        self._center = float(center_hz)
        self.tunes += 1

    def read(self, n_samples: int | None) -> IQBlock:
        n = int(n_samples or 4096)
        started = _utc()
        t0 = time.monotonic()
        start = int(self._rng.integers(0, self._pool.size // 2)) * 2
        idx = (start + np.arange(2 * n)) % self._pool.size
        raw = self._pool[idx]
        if self.pace:
            rest = n / self._rate - (time.monotonic() - t0)
            if rest > 0:
                time.sleep(rest)
        return IQBlock(self._center, self._rate, "cu8", raw, started)

    def set_bias_tee(self, enabled: bool) -> None:
        self.bias_tee = bool(enabled)

    def close(self) -> None:
        pass


def _count_open(state_dir: str) -> int:
    """Increment and return the number of openings recorded in ``state_dir`` (one file per opening)."""
    d = Path(state_dir)
    d.mkdir(parents=True, exist_ok=True)
    n = 1
    while True:
        try:
            fd = os.open(d / f"open{n:03d}", os.O_CREAT | os.O_EXCL | os.O_WRONLY)
            os.close(fd)
            return n
        except FileExistsError:
            n += 1


def opens_so_far(state_dir: str) -> int:
    """How many times a factory opened its source."""
    return len(list(Path(state_dir).glob("open*")))


class FaultySource(NoiseSource):
    """A :class:`NoiseSource` that fails once on its ``at_read``-th read (or tune)."""

    def __init__(self, mode: str, at_read: int, **kw):
        super().__init__(**kw)
        self.mode = mode
        self.at_read = at_read
        self.reads = 0

    def tune(self, center_hz: float) -> None:
        if self.mode == "tune-fail" and self.tunes + 1 >= self.at_read:
            raise ReceiverFault(f"could not tune to {center_hz / 1e6:.3f} MHz: driver error -1", -1)
        super().tune(center_hz)

    def read(self, n_samples: int | None) -> IQBlock:
        self.reads += 1
        if self.reads >= self.at_read:
            if self.mode == "unplug":
                raise ReceiverFault("could not read samples: the receiver disappeared (unplugged)", -4)
            if self.mode == "short-read":
                raise ReceiverFault("could not read samples: Short read, requested 262144 bytes, received 131072")
            if self.mode == "stall":
                while True:  # a synchronous read that never returns
                    time.sleep(1.0)
            if self.mode == "die":
                os._exit(9)
        return super().read(n_samples)


@dataclass(frozen=True)
class FaultFactory:
    """Picklable factory for the watchdog's child.

    ``mode`` strikes on openings listed in ``fault_opens`` (1-based; default the first only);
    ``busy_opens`` lists openings that fail with BUSY (-6) as a held device does.
    """

    state_dir: str
    mode: str = "none"
    at_read: int = 3
    fault_opens: tuple[int, ...] = (1,)
    busy_opens: tuple[int, ...] = ()
    sample_rate_hz: float = 2_400_000.0
    kw: dict = field(default_factory=dict)

    def __call__(self) -> NoiseSource:
        n = _count_open(self.state_dir)
        if n in self.busy_opens:
            raise ReceiverFault("cannot open receiver 0: the receiver is busy: the kernel DVB driver or "
                                "another program holds it", -6)
        mode = self.mode if n in self.fault_opens else "none"
        return FaultySource(mode, self.at_read, sample_rate_hz=self.sample_rate_hz, seed=n, **self.kw)


@dataclass(frozen=True)
class FakeDriverFactory:
    """Picklable factory: the real RtlSource on the librtlsdr stub, with stub faults on the first opening."""

    state_dir: str
    stub: dict = field(default_factory=dict)
    source: dict = field(default_factory=dict)

    def __call__(self):
        import rtlsdr.rtlsdr

        from fakes_driver import FakeLib
        from survey.sources.rtl import RtlSource

        n = _count_open(self.state_dir)
        lib = FakeLib(**(self.stub if n == 1 else {}))
        rtlsdr.rtlsdr.librtlsdr = lib
        return RtlSource(**self.source)
