"""A stand-in for librtlsdr (the ctypes library pyrtlsdr calls), for tests without hardware.

Install it with :func:`install` (patches ``rtlsdr.rtlsdr.librtlsdr``, the global that every
pyrtlsdr method looks up), so the real pyrtlsdr code runs on top of it: its error handling
(closing the device before raising), its buffer reuse and its gain snapping are exercised as
they are in the field. Return codes mimic librtlsdr: 0 or a count on success, a negative libusb
code on failure, -2 for an unchanged frequency correction (seen in the library's disassembly,
library notes section 2).
"""

from __future__ import annotations

import ctypes
import time
from dataclasses import dataclass, field

import numpy as np

#: Gain steps of the common tuner in tenths of a dB (29 steps, 0.0-49.6 dB), from memory of the
#: librtlsdr tuner table [M]; the count and end points match the reliability notes.
R820T_GAINS_TENTHS = (0, 9, 14, 27, 37, 77, 87, 125, 144, 157, 166, 197, 207, 229, 254, 280, 297,
                      328, 338, 364, 372, 386, 402, 421, 434, 439, 445, 480, 496)


@dataclass
class FakeDevice:
    serial: str = "00000001"
    name: str = "Test receiver"
    tuner_type: int = 5
    gains_tenths: tuple[int, ...] = R820T_GAINS_TENTHS


@dataclass
class FakeLib:
    """The stub library. ``calls`` logs ``(name, args...)`` of every call, in order."""

    devices: list[FakeDevice] = field(default_factory=lambda: [FakeDevice()])
    open_rc: int = 0
    fail_read_at: int | None = None  # 1-based read number that fails
    read_rc: int = -4
    short_read_at: int | None = None
    stall_read_at: int | None = None  # this read blocks forever (a wedged device)
    noise: bool = False  # fill reads with seeded Gaussian noise instead of the read counter
    fail_tune_hz: int | None = None
    fail_tune_rc: int = -1
    calls: list[tuple] = field(default_factory=list)
    # device state
    rate: int = 0
    center: int = 0
    gain_mode_manual: int = 0
    gain_tenths: int = 0
    ppm: int = 0
    agc: int = 1
    bias: int = 0
    opened: bool = False
    reads: int = 0

    def _log(self, *entry) -> None:
        self.calls.append(entry)

    # -- enumeration ------------------------------------------------------------------------
    def rtlsdr_get_device_count(self):
        self._log("get_device_count")
        return len(self.devices)

    def rtlsdr_get_device_name(self, index):
        return self.devices[index].name.encode() if index < len(self.devices) else b""

    def rtlsdr_get_device_usb_strings(self, index, manufact, product, serial):
        if index >= len(self.devices):
            return -1
        raw = self.devices[index].serial.encode()
        for i, b in enumerate(raw):
            serial[i] = b
        return 0

    def rtlsdr_get_index_by_serial(self, serial):
        for i, d in enumerate(self.devices):
            if d.serial.encode() == serial:
                return i
        return -3

    # -- open / close -----------------------------------------------------------------------
    def rtlsdr_open(self, dev_p, index):
        self._log("open", index)
        if self.open_rc < 0 or index >= len(self.devices):
            return self.open_rc if self.open_rc < 0 else -1
        self.opened = True
        self.index = index
        self.reads = 0
        self.ppm = 0
        self.agc = 1
        dev_p.value = 1000 + index
        return 0

    def rtlsdr_close(self, dev):
        self._log("close")
        self.opened = False
        return 0

    def rtlsdr_set_testmode(self, dev, on):
        return 0

    def rtlsdr_set_dithering(self, dev, on):
        return 0

    def rtlsdr_reset_buffer(self, dev):
        self._log("reset_buffer")
        return 0

    # -- settings ---------------------------------------------------------------------------
    def rtlsdr_get_tuner_type(self, dev):
        return self.devices[self.index].tuner_type

    def rtlsdr_get_tuner_gains(self, dev, buffer):
        gains = self.devices[self.index].gains_tenths
        if buffer is not None:
            for i, g in enumerate(gains):
                buffer[i] = g
        return len(gains)

    def rtlsdr_set_sample_rate(self, dev, rate):
        self._log("set_sample_rate", int(rate))
        self.rate = int(rate)
        return 0

    def rtlsdr_get_sample_rate(self, dev):
        return self.rate

    def rtlsdr_set_center_freq(self, dev, freq):
        self._log("set_center_freq", int(freq))
        if self.fail_tune_hz is not None and int(freq) == self.fail_tune_hz:
            return self.fail_tune_rc
        self.center = int(freq)
        return 0

    def rtlsdr_get_center_freq(self, dev):
        return self.center

    def rtlsdr_set_tuner_gain_mode(self, dev, manual):
        self._log("set_tuner_gain_mode", int(manual))
        self.gain_mode_manual = int(manual)
        return 0

    def rtlsdr_set_tuner_gain(self, dev, tenths):
        self._log("set_tuner_gain", int(tenths))
        self.gain_tenths = int(tenths)
        return 0

    def rtlsdr_get_tuner_gain(self, dev):
        return self.gain_tenths

    def rtlsdr_set_agc_mode(self, dev, on):
        self._log("set_agc_mode", int(on))
        self.agc = int(on)
        return 0

    def rtlsdr_set_freq_correction(self, dev, ppm):
        if not isinstance(ppm, int):  # ctypes would raise ArgumentError for a float
            raise ctypes.ArgumentError("argument 2: wrong type")
        self._log("set_freq_correction", ppm)
        if ppm == self.ppm:
            return -2  # librtlsdr: unchanged value
        self.ppm = ppm
        return 0

    def rtlsdr_get_freq_correction(self, dev):
        return self.ppm

    def rtlsdr_set_bias_tee(self, dev, on):
        self._log("set_bias_tee", int(on))
        self.bias = int(on)
        return 0

    # -- samples ----------------------------------------------------------------------------
    def rtlsdr_read_sync(self, dev, buf, n, n_read_ref):
        self.reads += 1
        self._log("read_sync", int(n))
        if not self.opened:
            return -4
        if self.stall_read_at is not None and self.reads >= self.stall_read_at:
            while True:
                time.sleep(1.0)
        if self.fail_read_at is not None and self.reads == self.fail_read_at:
            return self.read_rc
        view = np.ctypeslib.as_array(buf)
        if self.noise:
            rng = np.random.default_rng(self.reads)
            view[:n] = np.clip(np.round(127.5 + 8.0 * rng.standard_normal(n)), 0, 255).astype(np.uint8)
        else:
            view[:n] = self.reads % 256  # every read has its own value: reveals a missing copy
        got = n // 2 if self.short_read_at == self.reads else n
        n_read_ref._obj.value = got
        return 0


def install(monkeypatch, lib: FakeLib | None = None) -> FakeLib:
    """Patch pyrtlsdr to call ``lib`` instead of librtlsdr; returns the stub."""
    import rtlsdr.rtlsdr

    lib = lib or FakeLib()
    monkeypatch.setattr(rtlsdr.rtlsdr, "librtlsdr", lib)
    return lib
