"""Receiver in a watched child process: stalls, unplugs, short reads, BUSY reopenings, deaths.

Each fault must end with a consistent event log (a ``receiver-error`` then a ``gap``, or a
clear give-up) and the source usable again. Failure modes from the reliability notes.
"""

from __future__ import annotations

import threading

import pytest

from fault_sources import FakeDriverFactory, FaultFactory, opens_so_far
from survey.errors import ReceiverError
from survey.sources.base import IQSource
from survey.watchdog import SweepInterrupted, WatchdogSettings, WatchedSource

FAST = WatchdogSettings(stall_timeout_s=0.6, open_timeout_s=5.0, max_reopen=3, backoff_initial_s=0.02,
                        backoff_max_s=0.1, chunk_samples=16_384)


class Log:
    def __init__(self):
        self.events = []

    def __call__(self, kind, message):
        self.events.append((kind, message))

    def kinds(self):
        return [k for k, _ in self.events]


def _hop(src, n=50_000):
    src.tune(98e6)
    return src.read(n)


def test_normal_operation_streams_whole_hops(tmp_path):
    log = Log()
    src = WatchedSource(FaultFactory(str(tmp_path)), FAST, on_event=log)
    assert isinstance(src, IQSource)
    block = _hop(src, 50_000)  # four chunks of 16 384 samples, the last one short
    assert block.n_samples == 50_000 and block.raw.dtype.name == "uint8" and block.center_hz == 98e6
    assert src.describe()["watchdog"]["max_reopen"] == 3
    assert block.raw.flags.writeable
    src.close()
    src.close()
    assert log.events == []
    with pytest.raises(ReceiverError, match="closed"):
        src.tune(98e6)


def _fault_then_recover(tmp_path, factory, expect_text):
    log = Log()
    src = WatchedSource(factory, FAST, on_event=log)
    first_child = None
    with pytest.raises(SweepInterrupted):
        for _ in range(5):
            first_child = src._proc
            _hop(src)
    assert first_child is not None and not first_child.is_alive()  # the faulty child was ended
    assert log.kinds() == ["receiver-error", "gap"], log.events
    assert expect_text in log.events[0][1]
    assert "reopened after 1 attempt" in log.events[1][1] and "dropped" in log.events[1][1]
    assert _hop(src).n_samples == 50_000  # usable again, in a new child
    assert src.faults == 1 and src.gaps == 1
    src.close()


def test_unplug_mid_read_through_the_real_driver_wrapper(tmp_path):
    # LibUSBError errno -4 raised by pyrtlsdr itself over the librtlsdr stub.
    factory = FakeDriverFactory(str(tmp_path), stub={"fail_read_at": 6})
    _fault_then_recover(tmp_path, factory, "disappeared")
    assert opens_so_far(str(tmp_path)) == 2


def test_driver_read_that_never_returns_is_a_stall(tmp_path):
    factory = FakeDriverFactory(str(tmp_path), stub={"stall_read_at": 6})
    # A stall is recognised by the heartbeat timeout (the message names it), not by the read
    # returning: the test checks that path was taken, not how many seconds it took.
    _fault_then_recover(tmp_path, factory, "stalled")


def test_stall(tmp_path):
    _fault_then_recover(tmp_path, FaultFactory(str(tmp_path), "stall", at_read=2), "no samples for 0.6 s")


def test_short_read(tmp_path):
    _fault_then_recover(tmp_path, FaultFactory(str(tmp_path), "short-read", at_read=2), "Short read")


def test_child_death(tmp_path):
    _fault_then_recover(tmp_path, FaultFactory(str(tmp_path), "die", at_read=2), "exit code 9")


def test_tune_failure(tmp_path):
    _fault_then_recover(tmp_path, FaultFactory(str(tmp_path), "tune-fail", at_read=2), "could not tune")


def test_busy_on_reopen_backs_off_then_recovers(tmp_path):
    log = Log()
    factory = FaultFactory(str(tmp_path), "unplug", at_read=1, busy_opens=(2, 3))
    src = WatchedSource(factory, FAST, on_event=log)
    with pytest.raises(SweepInterrupted):
        _hop(src)
    assert log.kinds() == ["receiver-error", "receiver-error", "receiver-error", "gap"]
    assert "reopen attempt 1 of 3" in log.events[1][1] and "busy" in log.events[1][1]
    assert "after 3 attempt(s)" in log.events[3][1]
    assert _hop(src).n_samples == 50_000
    src.close()


def test_gives_up_after_n_failed_reopenings(tmp_path):
    log = Log()
    factory = FaultFactory(str(tmp_path), "unplug", at_read=1, busy_opens=tuple(range(2, 20)))
    src = WatchedSource(factory, FAST, on_event=log)
    with pytest.raises(ReceiverError) as err:
        _hop(src)
    assert not isinstance(err.value, SweepInterrupted)
    assert "after 3 attempts" in str(err.value) and "unplug and replug the receiver (USB power cycle)" in str(err.value)
    assert log.kinds().count("gap") == 0 and log.events[-1][1] == str(err.value)
    assert opens_so_far(str(tmp_path)) == 4
    src.close()


def test_gives_up_when_every_reopening_fails_again(tmp_path):
    log = Log()
    factory = FaultFactory(str(tmp_path), "tune-fail", at_read=1, fault_opens=tuple(range(1, 20)))
    src = WatchedSource(factory, FAST, on_event=log)
    faults = 0
    with pytest.raises(ReceiverError) as err:
        while True:
            try:
                _hop(src)
            except SweepInterrupted:
                faults += 1
    assert faults == 3 and "without one good hop" in str(err.value) and "USB power cycle" in str(err.value)
    assert log.kinds().count("gap") == 3
    src.close()


def test_first_opening_failure_is_not_retried(tmp_path):
    factory = FakeDriverFactory(str(tmp_path), stub={"devices": []})
    with pytest.raises(ReceiverError, match="no receiver found"):
        WatchedSource(factory, FAST)
    assert opens_so_far(str(tmp_path)) == 1


def test_stop_request_abandons_a_stalled_child_quickly(tmp_path):
    stop = threading.Event()
    log = Log()
    src = WatchedSource(FaultFactory(str(tmp_path), "stall", at_read=1),
                        WatchdogSettings(stall_timeout_s=30.0, stop_grace_s=0.3), on_event=log, stop_event=stop)
    threading.Timer(0.2, stop.set).start()
    with pytest.raises(SweepInterrupted, match="stop requested"):
        _hop(src)
    # Behaviour, not seconds: had the watchdog waited out its 30 s stall timeout, the hop would
    # end as a stall (a receiver-error event and a reopening); a stop is not a receiver fault.
    assert log.events == []
    assert src.faults == 0
    src.close()


def test_bias_tee_reapplied_after_reopening(tmp_path):
    factory = FakeDriverFactory(str(tmp_path), stub={"fail_read_at": 3})
    src = WatchedSource(factory, FAST)
    src.set_bias_tee(True)
    with pytest.raises(SweepInterrupted):
        _hop(src)
    assert opens_so_far(str(tmp_path)) == 2
    assert src.describe()["bias_tee"] is True  # the new child's receiver has it on again
    src.set_bias_tee(False)
    assert src.describe()["bias_tee"] is False
    src.close()


def test_read_ahead_in_order_and_out_of_order(tmp_path):
    src = WatchedSource(FaultFactory(str(tmp_path)), FAST)
    centers = [90e6, 94e6, 98e6]
    src.plan_ahead(centers, 20_000)
    for c in centers:
        src.tune(c)
        block = src.read(20_000)
        assert block.center_hz == c and block.n_samples == 20_000
    src.plan_ahead(centers, 20_000)
    src.tune(90e6)
    src.read(20_000)
    src.tune(98e6)  # not the announced next hop: the read-ahead at 94 MHz is discarded
    assert src.read(20_000).center_hz == 98e6
    block = src.read(10_000)  # another length than announced
    assert block.n_samples == 10_000 and block.center_hz == 98e6
    src.close()


def test_fault_during_read_ahead_surfaces_at_next_hop(tmp_path):
    log = Log()
    src = WatchedSource(FaultFactory(str(tmp_path), "unplug", at_read=2), FAST, on_event=log)
    src.plan_ahead([90e6, 94e6], 10_000)
    src.tune(90e6)
    src.read(10_000)  # one chunk: the second source read is the read-ahead, which fails
    with pytest.raises(SweepInterrupted):
        src.tune(94e6)
        src.read(10_000)
    assert log.kinds() == ["receiver-error", "gap"] and "unplugged" in log.events[0][1]
    src.close()


def test_close_with_read_ahead_in_flight_is_quick(tmp_path):
    src = WatchedSource(FaultFactory(str(tmp_path)), FAST)
    src.plan_ahead([90e6, 94e6], 400_000)  # the read-ahead exceeds the pipe's buffer
    src.tune(90e6)
    src.read(400_000)
    child = src._proc
    src.close()
    assert child is not None and not child.is_alive()  # ended, not left writing into a full pipe
