"""Live-receiver source on a stub of librtlsdr (tests/fakes_driver.py): real pyrtlsdr code above it.

Behaviours checked come from the pyrtlsdr 0.5.1 source and the reliability notes (library
notes section 2): closing on error, buffer reuse, -2 on an unchanged ppm, gain snapping.
"""

from __future__ import annotations

import sys

import numpy as np
import pytest

from fakes_driver import FakeDevice, FakeLib, install
from survey.errors import ReceiverError
from survey.sources import rtl
from survey.sources.base import IQSource


@pytest.fixture
def lib(monkeypatch):
    return install(monkeypatch)


def test_protocol_and_describe(lib):
    src = rtl.RtlSource(gain_db=29.7, ppm=0, sample_rate_hz=2.4e6)
    assert isinstance(src, IQSource)
    d = src.describe()
    assert d["tuner"] == "R820T" and d["gain_db"] == pytest.approx(29.7) and d["index"] == 0
    assert src.sample_rate_hz == pytest.approx(28.8e6 * 2**22 / ((28_800_000 * 2**22 // 2_400_000) & ~3))
    src.close()
    src.close()  # twice is safe
    assert not src.is_open


def test_manual_gain_mode_before_value_and_digital_agc_off(lib):
    src = rtl.RtlSource(gain_db=49.6)
    names = [c[0] for c in lib.calls]
    # the last manual-mode switch precedes the gain value
    last_mode = max(i for i, c in enumerate(lib.calls) if c == ("set_tuner_gain_mode", 1))
    last_gain = max(i for i, c in enumerate(lib.calls) if c[0] == "set_tuner_gain")
    assert last_mode < last_gain
    assert lib.calls[last_gain] == ("set_tuner_gain", 496)
    assert ("set_agc_mode", 0) in lib.calls and lib.agc == 0
    assert "set_freq_correction" not in names
    assert src.gain_db_set == pytest.approx(49.6)


def test_invalid_gain_lists_valid_steps(lib):
    with pytest.raises(ReceiverError) as err:
        rtl.RtlSource(gain_db=30.0)
    msg = str(err.value)
    assert "30.0 dB is not a step" in msg and "29.7" in msg and "49.6" in msg and "0.0" in msg
    assert not lib.opened  # closed on the way out


def test_ppm_set_only_when_different(lib):
    rtl.RtlSource(ppm=0).close()
    assert not [c for c in lib.calls if c[0] == "set_freq_correction"]
    lib.calls.clear()
    src = rtl.RtlSource(ppm=-12)
    assert [c for c in lib.calls if c[0] == "set_freq_correction"] == [("set_freq_correction", -12)]
    assert src.describe()["ppm"] == -12


def test_unchanged_ppm_would_close_the_device(lib, monkeypatch):
    # Proof that the guard matters: pyrtlsdr itself closes the device on -2.
    import rtlsdr.rtlsdr as drv

    sdr = drv.RtlSdr(0)
    with pytest.raises(OSError):
        sdr.freq_correction = 0
    assert not sdr.device_opened


def test_ppm_must_be_whole(lib):
    with pytest.raises(ReceiverError, match="whole number of ppm"):
        rtl.RtlSource(ppm=1.5)


@pytest.mark.parametrize("rate", [225_000, 300_001, 900_000, 3_200_001, 1_000])
def test_rejects_unaccepted_rates(lib, rate):
    with pytest.raises(ReceiverError, match="225001-300000 Hz or 900001-3200000 Hz"):
        rtl.RtlSource(sample_rate_hz=rate)


def test_accepts_edges_and_warns_above_2_4(lib):
    for rate in (225_001, 300_000, 900_001, 3_200_000):
        rtl.RtlSource(sample_rate_hz=rate).close()
    src = rtl.RtlSource(sample_rate_hz=2.56e6)
    assert src.warnings and "above 2.4 MS/s" in src.warnings[0]
    assert rtl.rate_warning(2.4e6) is None


def test_read_sizes_multiples():
    for n in (1, 16_384, 480_000, 5_000_000):
        sizes = rtl.read_sizes(n)
        assert all(s % 16_384 == 0 and 0 < s <= rtl.READ_BLOCK_BYTES for s in sizes)
        assert sum(sizes) >= n and sum(sizes) - n < 16_384 * max(1, len(sizes))
    assert len(rtl.read_sizes(65_536, min_reads=2)) == 2


def test_tune_resets_buffer_and_discards_settle(lib):
    src = rtl.RtlSource(gain_db=0.0, settle_s=0.0)
    lib.calls.clear()
    src.tune(98_000_000)
    names = [c[0] for c in lib.calls]
    assert names[0] == "set_center_freq" and names[1] == "reset_buffer"
    settle = [c[1] for c in lib.calls if c[0] == "read_sync"]
    assert len(settle) >= 2 and sum(settle) >= 2 * rtl.MIN_SETTLE_SAMPLES
    assert all(s % 16_384 == 0 for s in settle)
    lib.calls.clear()
    src.settle_s = 0.1  # 240 000 samples at 2.4 MS/s
    src.tune(99_000_000)
    assert sum(c[1] for c in lib.calls if c[0] == "read_sync") >= 2 * 240_000


def test_read_is_copied_and_in_multiples(lib):
    src = rtl.RtlSource(gain_db=0.0)
    src.tune(100e6)
    before = lib.reads
    block = src.read(240_000)
    assert block.datatype == "cu8" and block.raw.dtype == np.uint8 and block.raw.size == 480_000
    sizes = [c[1] for c in lib.calls if c[0] == "read_sync"][-(lib.reads - before):]
    assert all(s % 16_384 == 0 and s <= rtl.READ_BLOCK_BYTES for s in sizes)
    # each driver read filled the reused buffer with its own value; a missing copy would show
    # the last value everywhere
    values = np.unique(block.raw)
    assert values.size == len(sizes)
    first = block.raw.copy()
    src.read(240_000)
    np.testing.assert_array_equal(block.raw, first)  # a later read does not change an old block


@pytest.mark.parametrize("center", [23e6, 1800e6])
def test_tuning_range_checked_before_tuning(lib, center):
    src = rtl.RtlSource()
    lib.calls.clear()
    with pytest.raises(ReceiverError, match="outside the R820T tuner's range"):
        src.tune(center)
    assert not [c for c in lib.calls if c[0] == "set_center_freq"]
    assert src.is_open


def test_unplug_mid_read_discards_object(monkeypatch):
    lib = install(monkeypatch, FakeLib(fail_read_at=4, read_rc=-4))
    src = rtl.RtlSource()
    src.tune(100e6)  # reads 1-2 are the settle time
    with pytest.raises(rtl.ReceiverFault) as err:
        src.read(200_000)
    assert err.value.errno == -4 and "disappeared" in str(err.value)
    assert not src.is_open and not lib.opened
    with pytest.raises(ReceiverError, match="reopen"):
        src.read(1000)


def test_short_read_is_a_fault(monkeypatch):
    install(monkeypatch, FakeLib(short_read_at=3))
    src = rtl.RtlSource()
    src.tune(100e6)
    with pytest.raises(rtl.ReceiverFault, match="Short read") as err:
        src.read(1000)
    assert err.value.errno is None and not src.is_open


def test_tune_failure_is_a_fault(monkeypatch):
    install(monkeypatch, FakeLib(fail_tune_hz=101_000_000, fail_tune_rc=-7))
    src = rtl.RtlSource()
    with pytest.raises(rtl.ReceiverFault, match="timed out"):
        src.tune(101e6)
    assert not src.is_open


def test_busy_on_open(monkeypatch):
    install(monkeypatch, FakeLib(open_rc=-6))
    with pytest.raises(rtl.ReceiverFault, match="busy") as err:
        rtl.RtlSource()
    assert err.value.errno == -6


def test_no_device_names_problem_and_fix(monkeypatch):
    install(monkeypatch, FakeLib(devices=[]))
    with pytest.raises(ReceiverError) as err:
        rtl.RtlSource()
    msg = str(err.value)
    assert "no receiver found" in msg and "udev" in msg and "DVB" in msg and "\n" not in msg
    assert rtl.list_devices() == []


def test_list_devices_and_serial_selection(monkeypatch):
    lib = install(monkeypatch, FakeLib(devices=[FakeDevice(serial="AAA1"), FakeDevice(serial="77", tuner_type=1)]))
    devs = rtl.list_devices()
    assert [(d.index, d.serial, d.tuner) for d in devs] == [(0, "AAA1", "R820T"), (1, "77", "E4000")]
    assert rtl.device_count() == 2
    src = rtl.RtlSource(device="77")
    assert src.index == 1 and src.serial == "77" and src.tuner_name == "E4000"
    src.close()
    assert rtl.RtlSource(device="1").index == 1
    with pytest.raises(ReceiverError, match="AAA1, 77"):
        rtl.RtlSource(device="ZZZ")
    with pytest.raises(ReceiverError, match="index 5 does not exist"):
        rtl.RtlSource(device=5)


def test_bias_tee_on_and_off_at_close(lib):
    src = rtl.RtlSource(bias_tee=True)
    assert lib.bias == 1 and src.describe()["bias_tee"]
    src.close()
    assert lib.bias == 0


def test_missing_library(monkeypatch):
    # Library notes section 2: with pyrtlsdrlib hidden and no system librtlsdr, import raises.
    for name in [m for m in sys.modules if m == "rtlsdr" or m.startswith("rtlsdr.")]:
        monkeypatch.delitem(sys.modules, name)
    monkeypatch.setitem(sys.modules, "rtlsdr", None)
    with pytest.raises(ReceiverError) as err:
        rtl.RtlSource()
    assert "librtlsdr cannot be loaded" in str(err.value) and "pip install pyrtlsdrlib" in str(err.value)
