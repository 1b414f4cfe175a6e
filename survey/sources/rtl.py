"""Live receiver: an RTL2832U-family USB receiver through pyrtlsdr (the only importer of it).

The driver is imported lazily, inside :func:`load_driver`, so the rest of the package imports
and runs (replay, simulate, analysis) on a machine without the receiver library.

How the driver fails, and what this module does about it (facts from the pyrtlsdr and librtlsdr
sources; see the reliability notes in the documentation):

* Every failing pyrtlsdr call closes the device before raising ``LibUSBError`` (an ``OSError``
  whose ``errno`` is the libusb code: -4 no device / unplugged, -6 busy, -7 timeout). A short
  read raises a plain ``IOError`` and the partial buffer is lost. This module therefore
  *discards* the driver object after any driver error and raises :class:`ReceiverFault`;
  recovery means a new :class:`RtlSource` (the watchdog does that in a fresh child process).
* ``read_bytes`` returns a ctypes array that the library *reuses* on every call: each read is
  copied out into a fresh numpy array before the next read.
* Reads are made in multiples of 16 384 bytes, in blocks of about 256 KiB (16 MB and larger
  reads fail).
* Setting the frequency correction to the value it already has returns -2 inside librtlsdr,
  which pyrtlsdr turns into an error that closes the device: it is set only when it differs.
* ``set_gain`` silently snaps to the nearest tuner step: the requested gain is checked against
  the device's own list of steps first and the value actually set is read back and recorded.
* Out of the tuner's range the library fails with a misleading I/O error: the range is checked
  before tuning.
* After a retune the first samples are stale: the buffer is reset and a settle time (at least
  two reads, at least 32 768 samples) is discarded.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Any

import numpy as np

from survey.errors import ReceiverError
from survey.records import IQBlock

#: Bytes per driver read must be a multiple of this (USB bulk transfer granularity of librtlsdr).
READ_MULTIPLE_BYTES = 16_384
#: Default driver read size, about 256 KiB.
READ_BLOCK_BYTES = 16 * READ_MULTIPLE_BYTES
#: Minimum number of samples discarded after a retune (two reads of 16 384 samples).
MIN_SETTLE_SAMPLES = 32_768
#: Sample-rate ranges the RTL2832U accepts, Hz (inclusive), from the librtlsdr source.
ACCEPTED_RATES_HZ = ((225_001, 300_000), (900_001, 3_200_000))
#: Above this rate many hosts drop samples (silently for synchronous reads) [common practice, no source].
RELIABLE_RATE_HZ = 2_400_000
#: Crystal of the RTL2832U, Hz (used by pyrtlsdr to compute the real rate).
CRYSTAL_HZ = 28_800_000

#: Tuner type codes returned by ``rtlsdr_get_tuner_type`` (librtlsdr ``enum rtlsdr_tuner``).
TUNER_NAMES = {0: "unknown", 1: "E4000", 2: "FC0012", 3: "FC0013", 4: "FC2580", 5: "R820T", 6: "R828D"}

#: Tuning ranges per tuner type, Hz. R820T/R828D: about 24-1766 MHz, derived from the driver
#: code (reliability notes). The others are from memory of the driver sources [M], not re-checked.
TUNING_RANGES_HZ: dict[int, tuple[tuple[float, float], ...]] = {
    1: ((52e6, 1100e6), (1250e6, 2200e6)),  # [M]
    2: ((22e6, 948.6e6),),  # [M]
    3: ((22e6, 1100e6),),  # [M]
    4: ((146e6, 308e6), (438e6, 924e6)),  # [M]
    5: ((24e6, 1766e6),),
    6: ((24e6, 1766e6),),
}
#: Range assumed for an unknown tuner (the common tuner's).
DEFAULT_TUNING_RANGE_HZ = ((24e6, 1766e6),)

_SETUP_HINT = (
    "plug the receiver in, check that lsusb lists it, install the udev rule for non-root access "
    "and unload the kernel DVB driver (see the README, 'Setting up the receiver on Linux')"
)


class ReceiverFault(ReceiverError):
    """The receiver failed mid-run (unplugged, busy, timed out, short read); reopen it.

    ``errno`` is the libusb error code when the driver gave one (-4 no device, -6 busy,
    -7 timeout), else None (a short read).
    """

    def __init__(self, message: str, errno: int | None = None):
        super().__init__(message)
        self.errno = errno


@dataclass(frozen=True)
class DeviceInfo:
    """One attached receiver as listed by :func:`list_devices`."""

    index: int
    serial: str
    name: str
    tuner: str | None


def load_driver() -> Any:
    """Import and return the ``rtlsdr`` package, or raise :class:`ReceiverError` saying how to fix it."""
    try:
        import rtlsdr  # noqa: F401  (the only import of the driver in the project)
        import rtlsdr.rtlsdr
    except (ImportError, OSError) as exc:
        raise ReceiverError(
            f"the receiver library librtlsdr cannot be loaded ({exc}); install it with "
            "'pip install pyrtlsdrlib' or your distribution's librtlsdr package"
        ) from exc
    if getattr(rtlsdr, "RtlSdr", None) is None:
        raise ReceiverError(
            "pyrtlsdr runs in client-only mode (RTLSDR_CLIENT_MODE is set); unset that variable"
        )
    return rtlsdr


def _utc_now() -> str:
    # Same format as survey.store.utc_now (not imported here: the store pulls in sqlite-utils).
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _lib(driver: Any) -> Any:
    # Looked up at call time so that a stub patched into rtlsdr.rtlsdr is used.
    return driver.rtlsdr.librtlsdr


def errno_message(errno: int | None) -> str:
    """Plain-words meaning and remedy of a libusb error code from the driver."""
    if errno == -4:
        return "the receiver disappeared (unplugged or lost power); check the USB cable and hub"
    if errno == -6:
        return ("the receiver is busy: the kernel DVB driver or another program holds it; "
                "stop that program or unload the DVB driver")
    if errno == -7:
        return "the receiver timed out delivering samples; check USB power and cabling"
    if errno == -3:
        return "access to the receiver was denied; install the udev rule (see the README, 'Setting up the receiver on Linux')"
    if errno == -9:
        return "USB pipe error (wedged receiver); unplug and replug it"
    return f"driver error {errno}; unplug and replug the receiver"


def device_count() -> int:
    """Number of attached receivers, counted by the library without opening any of them."""
    driver = load_driver()
    return int(_lib(driver).rtlsdr_get_device_count())


def list_devices() -> list[DeviceInfo]:
    """Attached receivers: index, serial, USB name and tuner type.

    Counting and serials come from ``rtlsdr_get_device_count`` and
    ``RtlSdr.get_device_serial_addresses`` (no device is opened for that). The tuner type needs
    the device open: each device is opened briefly; a device that cannot be opened (busy,
    permissions) is listed with ``tuner=None``.
    """
    driver = load_driver()
    lib = _lib(driver)
    n = int(lib.rtlsdr_get_device_count())
    if n == 0:
        return []
    base = driver.rtlsdr.BaseRtlSdr
    try:
        serials = base.get_device_serial_addresses()
    except OSError as exc:
        raise ReceiverError(f"cannot read the receivers' USB strings ({exc}); {_SETUP_HINT}") from exc
    out = []
    for i in range(n):
        name = lib.rtlsdr_get_device_name(i)
        name = name.decode("utf-8", "replace") if isinstance(name, bytes) else str(name or "")
        tuner = None
        try:
            sdr = driver.rtlsdr.RtlSdr(device_index=i)
        except OSError:
            sdr = None
        if sdr is not None:
            try:
                tuner = TUNER_NAMES.get(int(sdr.get_tuner_type()), "unknown")
            except OSError:
                tuner = None
            finally:
                sdr.close()
        out.append(DeviceInfo(index=i, serial=serials[i] if i < len(serials) else "", name=name, tuner=tuner))
    return out


def check_sample_rate(sample_rate_hz: float) -> int:
    """Validate a requested rate against the accepted ranges; returns it as an int (Hz)."""
    rate = int(round(float(sample_rate_hz)))
    if not any(lo <= rate <= hi for lo, hi in ACCEPTED_RATES_HZ):
        raise ReceiverError(
            f"sample rate {rate} Hz is not accepted by the receiver; choose 225001-300000 Hz or "
            "900001-3200000 Hz (2.4 MS/s is the usual choice)"
        )
    return rate


def rate_warning(sample_rate_hz: float) -> str | None:
    """A warning text when the rate is above the rate most hosts sustain, else None."""
    if float(sample_rate_hz) > RELIABLE_RATE_HZ:
        return (f"sample rate {sample_rate_hz / 1e6:.3f} MS/s is above 2.4 MS/s: many hosts drop "
                "samples at such rates, silently for synchronous reads")
    return None


def read_sizes(n_bytes: int, block_bytes: int = READ_BLOCK_BYTES, min_reads: int = 1) -> list[int]:
    """Driver read sizes covering ``n_bytes``: multiples of 16 384, each at most ``block_bytes``.

    The total is ``n_bytes`` rounded up to a multiple of 16 384 (never less than ``min_reads``
    multiples), split into at least ``min_reads`` reads.
    """
    if block_bytes % READ_MULTIPLE_BYTES or block_bytes <= 0:
        raise ReceiverError(f"read block {block_bytes} bytes is not a multiple of {READ_MULTIPLE_BYTES}")
    units = max(int(math.ceil(n_bytes / READ_MULTIPLE_BYTES)), min_reads)
    per = block_bytes // READ_MULTIPLE_BYTES
    n_reads = max(int(math.ceil(units / per)), min_reads)
    base, extra = divmod(units, n_reads)
    return [READ_MULTIPLE_BYTES * (base + (1 if k < extra else 0)) for k in range(n_reads)]


class RtlSource:
    """IQ source on a live receiver.

    Parameters
    ----------
    device : int or str, optional
        Device index, or serial number (a digit string that matches a serial is taken as a
        serial). Default: the first receiver.
    sample_rate_hz : float
        Requested rate, Hz; checked against the accepted ranges and read back.
    gain_db : float or None
        Manual tuner gain, dB; must be one of the tuner's steps (``valid_gains_db``). None uses
        the tuner's own AGC (not recommended for measurements).
    ppm : int
        Frequency correction, parts per million (set only when it differs from the device's).
    settle_s : float
        Samples discarded after each retune, s (at least :data:`MIN_SETTLE_SAMPLES`).
    bias_tee : bool
        Switch the DC supply on the antenna input on. **Caution:** DC on the coax can damage
        equipment that shorts it (a DC-grounded antenna, a splitter, a generator output);
        use it only to power a preamp made for it.
    read_block_bytes : int
        Driver read size (multiple of 16 384 bytes).

    Raises
    ------
    ReceiverError
        Library missing, no receiver, receiver busy or refused, or a setting out of range;
        the message says how to fix it.
    """

    kind = "rtl"

    def __init__(
        self,
        device: int | str | None = None,
        *,
        sample_rate_hz: float = 2_400_000.0,
        gain_db: float | None = None,
        ppm: int = 0,
        settle_s: float = 0.02,
        bias_tee: bool = False,
        read_block_bytes: int = READ_BLOCK_BYTES,
    ):
        if isinstance(ppm, bool) or not float(ppm).is_integer():
            raise ReceiverError(f"frequency correction must be a whole number of ppm, got {ppm!r}")
        self._driver = load_driver()
        self._sdr = None
        self.read_block_bytes = int(read_block_bytes)
        read_sizes(READ_MULTIPLE_BYTES, self.read_block_bytes)  # validates the block size
        self.settle_s = float(settle_s)
        self.requested_rate_hz = check_sample_rate(sample_rate_hz)
        self.warnings: tuple[str, ...] = tuple(w for w in [rate_warning(self.requested_rate_hz)] if w)
        self._center_hz: float | None = None
        self._bias_tee = False
        index, serial = self._resolve(device)
        self.index, self.serial = index, serial
        try:
            self._sdr = self._driver.rtlsdr.RtlSdr(device_index=index)
        except OSError as exc:
            errno = getattr(exc, "errno", None)
            if errno == -6:
                raise ReceiverFault(f"cannot open receiver {index}: {errno_message(-6)}", errno) from exc
            if errno == -3:
                raise ReceiverError(f"cannot open receiver {index}: {errno_message(-3)}") from exc
            raise ReceiverFault(
                f"cannot open receiver {index} (driver error {errno}); it may be held by the kernel DVB "
                "driver or another program, or need the udev rule: see the README, 'Setting up the receiver on Linux'",
                errno,
            ) from exc
        try:
            self._configure(gain_db, int(ppm), bool(bias_tee))
        except BaseException:
            self.close()
            raise

    # -- opening ---------------------------------------------------------------------------
    def _resolve(self, device: int | str | None) -> tuple[int, str | None]:
        lib = _lib(self._driver)
        n = int(lib.rtlsdr_get_device_count())
        if n == 0:
            raise ReceiverError(f"no receiver found; {_SETUP_HINT}")
        if device is None:
            return 0, None
        if isinstance(device, int) and not isinstance(device, bool):
            if not 0 <= device < n:
                raise ReceiverError(f"receiver index {device} does not exist ({n} attached: 0-{n - 1}); "
                                    "run 'bandcensus devices'")
            return device, None
        text = str(device).strip()
        try:
            serials = self._driver.rtlsdr.BaseRtlSdr.get_device_serial_addresses()
        except OSError as exc:
            raise ReceiverError(f"cannot read the receivers' serial numbers ({exc}); {_SETUP_HINT}") from exc
        if text in serials:
            return serials.index(text), text
        if text.isdigit() and int(text) < n:
            return int(text), None
        raise ReceiverError(
            f"no receiver with serial or index {text!r}; attached serials: {', '.join(serials) or 'none'}; "
            "run 'bandcensus devices'"
        )

    def _configure(self, gain_db: float | None, ppm: int, bias_tee: bool) -> None:
        sdr = self._sdr
        self.tuner_type = int(self._call(sdr.get_tuner_type, "read the tuner type"))
        self.tuner_name = TUNER_NAMES.get(self.tuner_type, "unknown")
        self.tuning_ranges_hz = TUNING_RANGES_HZ.get(self.tuner_type, DEFAULT_TUNING_RANGE_HZ)
        self.valid_gains_db = tuple(float(g) for g in sdr.valid_gains_db)
        # Sample rate, then read back the rate really produced by the resampler.
        self._call(lambda: sdr.set_sample_rate(self.requested_rate_hz), "set the sample rate")
        self._rate_hz = float(self._call(sdr.get_sample_rate, "read back the sample rate"))
        # Digital AGC of the demodulator off: it would change the scale of the samples.
        self._call(lambda: sdr.set_agc_mode(False), "switch the digital AGC off")
        if gain_db is None:
            self._call(lambda: sdr.set_manual_gain_enabled(False), "select tuner AGC")
            self.gain_db_set: float | None = None
        else:
            self.gain_db_set = self._set_gain(float(gain_db))
        # Set only when different: an unchanged value makes librtlsdr return -2 and pyrtlsdr close.
        current = int(self._call(sdr.get_freq_correction, "read the frequency correction"))
        if ppm != current:
            self._call(lambda: sdr.set_freq_correction(int(ppm)), "set the frequency correction")
        self.ppm = int(ppm)
        if bias_tee:
            self.set_bias_tee(True)

    def _set_gain(self, gain_db: float) -> float:
        sdr = self._sdr
        if not self.valid_gains_db:
            raise ReceiverError("the tuner reports no gain steps; unplug and replug the receiver")
        match = [g for g in self.valid_gains_db if abs(g - gain_db) < 0.05]
        if not match:
            steps = ", ".join(f"{g:.1f}" for g in self.valid_gains_db)
            raise ReceiverError(f"gain {gain_db:.1f} dB is not a step of this tuner; choose one of: {steps} dB")
        # Manual gain mode first, then the value (the value is ignored in AGC mode).
        self._call(lambda: sdr.set_manual_gain_enabled(True), "select manual gain")
        self._call(lambda: sdr.set_gain(match[0]), "set the gain")
        return float(self._call(sdr.get_gain, "read back the gain"))

    # -- driver calls ----------------------------------------------------------------------
    def _call(self, fn, what: str):
        if self._sdr is None:
            raise ReceiverError("the receiver was closed after an earlier error; reopen it")
        try:
            return fn()
        except OSError as exc:  # LibUSBError (errno = libusb code) or IOError short read
            errno = exc.errno if isinstance(exc.errno, int) and exc.errno < 0 else None
            self._discard()
            if errno is None:
                raise ReceiverFault(f"could not {what}: {exc}; the samples are lost and the receiver "
                                    "must be reopened") from exc
            raise ReceiverFault(f"could not {what}: {errno_message(errno)}", errno) from exc
        except Exception as exc:  # ctypes.ArgumentError and the like: a bug or a bad value
            self._discard()
            raise ReceiverError(f"could not {what}: {exc}") from exc

    def _discard(self) -> None:
        sdr, self._sdr = self._sdr, None
        if sdr is not None:
            try:
                sdr.close()
            except Exception:  # already closed by the driver
                pass

    # -- IQSource --------------------------------------------------------------------------
    @property
    def sample_rate_hz(self) -> float:
        """Actual sample rate, Hz, as read back from the device."""
        return self._rate_hz

    @property
    def fixed_centers_hz(self) -> None:
        """None: a live receiver is tunable."""
        return None

    @property
    def is_open(self) -> bool:
        """False after :meth:`close` or after a driver error."""
        return self._sdr is not None

    def describe(self) -> dict:
        """Device description for the ``runs`` table."""
        return {
            "kind": self.kind,
            "index": self.index,
            "serial": self.serial,
            "tuner": self.tuner_name,
            "sample_rate_hz": self._rate_hz,
            "requested_sample_rate_hz": self.requested_rate_hz,
            "gain_db": self.gain_db_set,
            "ppm": self.ppm,
            "settle_s": self.settle_s,
            "bias_tee": self._bias_tee,
            "warnings": list(self.warnings),
        }

    def check_tunable(self, center_hz: float) -> None:
        """Raise :class:`ReceiverError` if ``center_hz`` is outside the tuner's range."""
        if not any(lo <= center_hz <= hi for lo, hi in self.tuning_ranges_hz):
            ranges = ", ".join(f"{lo / 1e6:g}-{hi / 1e6:g} MHz" for lo, hi in self.tuning_ranges_hz)
            raise ReceiverError(
                f"{center_hz / 1e6:.3f} MHz is outside the {self.tuner_name} tuner's range ({ranges}); "
                "choose a band inside it"
            )

    def tune(self, center_hz: float) -> None:
        """Tune, reset the buffer and discard the settle time (at least two reads, 32 768 samples)."""
        self.check_tunable(center_hz)
        sdr = self._sdr
        self._call(lambda: sdr.set_center_freq(int(round(center_hz))), f"tune to {center_hz / 1e6:.3f} MHz")
        self._reset_buffer()
        settle_samples = max(MIN_SETTLE_SAMPLES, int(math.ceil(self.settle_s * self._rate_hz)))
        for size in read_sizes(2 * settle_samples, self.read_block_bytes, min_reads=2):
            self._call(lambda: sdr.read_bytes(size), "read the settle samples")
        self._center_hz = float(center_hz)

    def _reset_buffer(self) -> None:
        sdr = self._sdr
        lib = _lib(self._driver)

        def reset():
            rc = lib.rtlsdr_reset_buffer(sdr.dev_p)
            if rc < 0:
                raise self._driver.rtlsdr.LibUSBError(rc, "Could not reset buffer")

        self._call(reset, "reset the sample buffer")

    def read(self, n_samples: int | None) -> IQBlock:
        """Read ``n_samples`` complex samples (``cu8``), copied out of the driver's buffer."""
        if self._center_hz is None:
            raise ReceiverError("read before tune; tune the receiver to a hop centre first")
        n = int(n_samples) if n_samples is not None else int(round(0.1 * self._rate_hz))
        if n <= 0:
            raise ReceiverError(f"cannot read {n} samples; ask for at least one")
        sdr = self._sdr
        sizes = read_sizes(2 * n, self.read_block_bytes)
        out = np.empty(sum(sizes), dtype=np.uint8)
        started = _utc_now()
        pos = 0
        for size in sizes:
            buf = self._call(lambda: sdr.read_bytes(size), "read samples")
            # The driver reuses ``buf`` on the next call: copy it out now.
            out[pos:pos + size] = np.ctypeslib.as_array(buf)[:size]
            pos += size
        return IQBlock(center_hz=self._center_hz, sample_rate_hz=self._rate_hz, datatype="cu8",
                       raw=out[: 2 * n], started_utc=started)

    def set_bias_tee(self, enabled: bool) -> None:
        """Switch the DC supply on the antenna input.

        **Caution:** DC on the coax can damage equipment that shorts it (a DC-grounded antenna,
        some splitters, a signal generator's output). Switch it on only with a preamp made to
        be powered through the coax. A change takes effect before the next retune, whose settle
        time then also covers the preamp's power-up.
        """
        if bool(enabled) == self._bias_tee and not enabled:
            return
        sdr = self._sdr
        self._call(lambda: sdr.set_bias_tee(bool(enabled)), "switch the bias tee")
        self._bias_tee = bool(enabled)

    def close(self) -> None:
        """Release the receiver. Safe to call twice."""
        if self._sdr is not None and self._bias_tee:
            try:
                self._sdr.set_bias_tee(False)
            except Exception:
                pass
            self._bias_tee = False
        self._discard()
