"""The progress line as a terminal user sees it (a fake terminal), and its silence elsewhere."""

import io
import re

from rich.console import Console

from bandcensus.commands._progress import sweep_progress
from survey.sweep import HopProgress

_ESCAPES = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")


class _Clock:
    def __init__(self):
        self.t = 1000.0

    def __call__(self):
        return self.t


def _terminal():
    buffer = io.StringIO()
    return Console(file=buffer, force_terminal=True, width=120, color_system=None), buffer


def _hop(i, n=4):
    return HopProgress(hop_index=i, n_hops=n, center_hz=90e6 + i * 1.8e6, floor_dbfs_hz=-100.0)


def test_shows_sweep_hop_elapsed_and_time_left():
    console, buffer = _terminal()
    clock = _Clock()
    with sweep_progress(3, console=console, clock=clock, auto_refresh=False) as progress:
        for k in range(2):
            progress.start_sweep("bare, antenna")
            for i in range(4):
                clock.t += 5.0
                progress.on_hop(_hop(i))
            progress.on_sweep()
    text = _ESCAPES.sub("", buffer.getvalue())
    assert "sweep 1 of 3 [bare, antenna] hop 1 of 4" in text
    assert "sweep 2 of 3 [bare, antenna] hop 3 of 4" in text
    # after 6 hops (1.5 sweeps) at 5 s each: 30 s elapsed, 1.5 sweeps left -> 30 s left
    assert "0:00:30 elapsed" in text and "0:00:30 left" in text
    # after 8 hops: 40 s elapsed, one sweep of three left -> 20 s left
    assert "0:00:40 elapsed" in text and "0:00:20 left" in text


def test_unpacks_into_two_callbacks():
    console, buffer = _terminal()
    with sweep_progress(1, console=console, clock=_Clock(), auto_refresh=False) as (on_hop, on_sweep):
        on_hop(_hop(0, 2))
        on_hop(_hop(1, 2))
        on_sweep(object())
    assert "sweep 1 of 1 hop 2 of 2" in _ESCAPES.sub("", buffer.getvalue())


def test_silent_when_not_a_terminal_or_quiet():
    for console_kw, quiet in (({"force_terminal": False}, False), ({"force_terminal": True}, True)):
        buffer = io.StringIO()
        console = Console(file=buffer, width=120, **console_kw)
        with sweep_progress(2, quiet, console=console, clock=_Clock(), auto_refresh=False) as progress:
            progress.on_hop(_hop(0))
            progress.on_sweep()
            progress.note("a line")
        assert buffer.getvalue() == ""
        assert not progress.enabled


def test_open_ended_scan_uses_the_schedule_estimate():
    from types import SimpleNamespace as Event

    console, buffer = _terminal()
    clock = _Clock()
    with sweep_progress(None, console=console, clock=clock, auto_refresh=False) as progress:
        clock.t += 12.0
        progress.on_schedule(Event(event="hop", sweep_number=1, sweeps_total=None, configuration="preamp-a",
                                   hop_index=0, n_hops=12, time_left_s=3600.0, next_sweep_in_s=None))
        progress.on_schedule(Event(event="sweep", sweep_number=1, sweeps_total=None, configuration="preamp-a",
                                   time_left_s=3500.0, next_sweep_in_s=60.0))
        progress.on_schedule(Event(event="wait", sweep_number=1, sweeps_total=None, configuration="preamp-a",
                                   time_left_s=3490.0, next_sweep_in_s=50.0))
        progress.on_schedule(Event(event="gap", sweep_number=2, sweeps_total=None, configuration="preamp-a",
                                   time_left_s=3400.0, next_sweep_in_s=None))
    text = _ESCAPES.sub("", buffer.getvalue())
    assert "sweep 1 [preamp-a] hop 1 of 12" in text and "1:00:00 left" in text
    assert "next sweep in 50 s" in text and "0:58:10 left" in text
    assert "receiver fault: sweep [preamp-a] dropped" in text


def test_driven_by_the_sweep_engine():
    import generator_bench as bench
    from survey.sweep import plan_for_source, run_sweep

    console, buffer = _terminal()
    clock = _Clock()
    source = bench.GeneratorBench(None, 0.0)
    settings = bench.settings()
    plan = plan_for_source(bench.BAND, source, settings)
    with sweep_progress(2, console=console, clock=clock, auto_refresh=False) as progress:
        for _ in range(2):
            progress.start_sweep("bare, terminated")
            run_sweep(source, plan, settings, "bare", "terminated", on_hop=progress.on_hop)
            progress.on_sweep()
    text = _ESCAPES.sub("", buffer.getvalue())
    n = len(plan.hops)
    assert n > 1
    assert f"sweep 1 of 2 [bare, terminated] hop {n} of {n}" in text
    assert f"sweep 2 of 2 [bare, terminated] hop 1 of {n}" in text


def test_report_steps_on_a_terminal_and_silence_elsewhere(tmp_path):
    # the report's library steps (analysis.report.build.REPORT_STEPS, then the page) drive the line
    from analysis.report.build import REPORT_STEPS
    from bandcensus.commands._progress import step_progress

    console, buffer = _terminal()
    with step_progress(console=console, auto_refresh=False) as on_step:
        for k, what in enumerate((*REPORT_STEPS, "figures and page")):
            on_step(what, k, len(REPORT_STEPS) + 1)
    text = _ESCAPES.sub("", buffer.getvalue())
    assert "step 1 of 4: overnight series" in text and "step 4 of 4: figures and page" in text
    for console_kw, quiet in (({"force_terminal": False}, False), ({"force_terminal": True}, True)):
        quiet_buffer = io.StringIO()
        with step_progress(quiet, console=Console(file=quiet_buffer, width=120, **console_kw)) as on_step:
            on_step("passband", 2, 4)
        assert quiet_buffer.getvalue() == ""


def test_report_library_tells_each_step_in_order(tmp_path):
    from analysis.report.html import write_report
    from report_fixtures import HOSTILE_BASE, HOSTILE_TEST, hostile_db

    db = hostile_db(tmp_path / "truth.db")
    steps = []
    write_report(db, HOSTILE_BASE, HOSTILE_TEST, tmp_path / "r.html",
                 on_step=lambda what, k, n: steps.append((what, k, n)))
    assert [k for _, k, _ in steps] == [0, 1, 2, 3] and {n for _, _, n in steps} == {4}
    assert steps[0][0] == "overnight series" and steps[-1][0] == "figures and page"
