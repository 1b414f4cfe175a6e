"""Measure one sweep and store it: the step shared by replay, simulate and scan.

:func:`record_sweep` runs :func:`survey.sweep.run_sweep`, optionally keeps the raw IQ as a
SigMF recording, and writes the result in one transaction. It is :func:`measure_sweep` (no
database; may run in a worker process) followed by :func:`store_sweep`. A sweep that ended early (stop
request) is stored with ``complete = 0`` and never as complete; a sweep that raised is not
stored at all (the caller records the gap).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable

import numpy as np

from survey.records import HopPlan, SweepResult, SweepSettings
from survey.sources.base import IQSource
from survey.store import SurveyStore
from survey.sweep import HopProgress, run_sweep


#: Note stored with a sweep (and shown) when hops delivered constant samples.
NO_SIGNAL = "no signal (receiver not delivering samples?)"


@dataclass(frozen=True)
class SweepOutcome:
    """What :func:`record_sweep` stored: the sweep id, the result and the recording (if kept).

    ``no_signal_hops`` are the hops whose samples were all the same value (all zero, all 127
    ...): nothing was received there, whatever the spectrum's arithmetic says.
    """

    sweep_id: int
    result: SweepResult
    recording_path: Path | None
    no_signal_hops: tuple[int, ...] = ()


class _ConstantBlockCheck:
    """Block sink that notes hops whose I and Q samples are each constant, then passes blocks on.

    A constant input has no noise at all, which no working receiver delivers (its own noise
    always moves the lowest bits): such a hop is "no signal", never a list of received channels.
    """

    def __init__(self, inner) -> None:
        self.inner = inner
        self.constant: list[int] = []
        self._k = 0

    def add_block(self, block) -> None:
        raw = block.raw
        if raw.size >= 2:
            iq = raw[: raw.size - raw.size % 2].reshape(-1, 2)
            head = iq[:64]
            if raw.dtype.kind in "iu" and ((head[:, 0] != head[0, 0]).any() or (head[:, 1] != head[0, 1]).any()):
                pass  # integer samples that already differ: not constant (no NaN to skip)
            elif all(float(np.nanmin(iq[:, c])) == float(np.nanmax(iq[:, c])) for c in (0, 1)):
                self.constant.append(self._k)
        self._k += 1
        if self.inner is not None:
            self.inner.add_block(block)


def _without_dead_hops(result: SweepResult, dead: list[int]) -> SweepResult:
    """Channels of constant-sample hops are not received; the sweep's notes say why."""
    if not dead:
        return result
    dead_indices = {result.hops[k].index for k in dead if k < len(result.hops)}
    channels = tuple(
        replace(c, received=False, cn_db=None) if c.hop_index in dead_indices else c for c in result.channels
    )
    which = "every hop" if len(dead_indices) == len(result.hops) else f"hop(s) {', '.join(map(str, sorted(dead_indices)))}"
    note = f"{NO_SIGNAL}: constant samples in {which}"
    return replace(result, channels=channels, notes="; ".join(n for n in (result.notes, note) if n))


def _recording_name(configuration: str, input: str, run_id: int, sequence: int) -> str:
    safe = "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in f"{configuration}_{input}")
    return f"run{run_id:04d}_sweep{sequence:05d}_{safe}"


@dataclass(frozen=True)
class MeasuredSweep:
    """A sweep measured but not yet stored (what :func:`measure_sweep` hands to :func:`store_sweep`).

    Small enough to send between processes: the result's readings (and the hops' spectra when
    ``keep_spectra``, which the store keeps anyway), never the raw samples.
    """

    result: SweepResult
    keep_spectra: bool
    recording_path: Path | None = None
    no_signal_hops: tuple[int, ...] = ()


def _keeps_spectra(keep_spectra: bool | None, notch_channels_hz: tuple[int, ...]) -> bool:
    # default yes; the DC notch works on the hop's spectrum, so it needs them
    return True if keep_spectra is None or notch_channels_hz else bool(keep_spectra)


def measure_sweep(
    source: IQSource,
    plan: HopPlan,
    settings: SweepSettings,
    configuration: str,
    input: str,
    *,
    keep_spectra: bool | None = None,
    sink=None,
    on_hop: Callable[[HopProgress], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    recording: str | None = None,
    notes: str = "",
    dc_notch_hz: float = 0.0,
    notch_channels_hz: tuple[int, ...] = (),
) -> MeasuredSweep:
    """Measure ``plan`` with ``source`` (the part of :func:`record_sweep` before the store).

    Runs :func:`survey.sweep.run_sweep`, the constant-block (no signal) check, the DC-notched
    channels of a single capture and the notes. ``sink`` (a :class:`survey.recorder.SweepRecorder`)
    is finished when the sweep is complete and aborted otherwise. Touches no database, so it
    can run in a worker process (:mod:`survey.replay_workers`). Parameters as :func:`record_sweep`.
    """
    keep_spectra = _keeps_spectra(keep_spectra, notch_channels_hz)
    check = _ConstantBlockCheck(sink)
    try:
        result = run_sweep(
            source, plan, settings, configuration, input,
            sink=check, keep_psd=keep_spectra, on_hop=on_hop, should_stop=should_stop,
        )
    except BaseException:
        if sink is not None:
            sink.abort()
        raise
    recording_path = None
    if sink is not None:
        if result.complete:
            recording_path = sink.finish()
        else:
            sink.abort()
    if recording_path is not None:
        result = replace(result, recording=str(recording_path))
    elif recording is not None:
        result = replace(result, recording=str(recording))
    if notes:
        result = replace(result, notes="; ".join(n for n in (result.notes, notes) if n))
    if notch_channels_hz and result.complete:
        from survey.dc_notch import measure_inside_guard

        result = measure_inside_guard(result, float(dc_notch_hz), notch_channels_hz, settings.received_margin_db)
    result = _without_dead_hops(result, check.constant)
    return MeasuredSweep(result=result, keep_spectra=keep_spectra, recording_path=recording_path,
                         no_signal_hops=tuple(result.hops[k].index for k in check.constant if k < len(result.hops)))


def store_sweep(store: SurveyStore, run_id: int, measured: MeasuredSweep) -> SweepOutcome:
    """Write a measured sweep to ``store`` in one transaction (the part of :func:`record_sweep` after
    the measurement)."""
    sweep_id = store.write_sweep(run_id, measured.result, keep_spectra=measured.keep_spectra)
    return SweepOutcome(sweep_id=sweep_id, result=measured.result, recording_path=measured.recording_path,
                        no_signal_hops=measured.no_signal_hops)


def record_sweep(
    store: SurveyStore,
    run_id: int,
    source: IQSource,
    plan: HopPlan,
    settings: SweepSettings,
    configuration: str,
    input: str,
    *,
    keep_iq_dir: str | Path | None = None,
    keep_spectra: bool | None = None,
    on_hop: Callable[[HopProgress], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    recording_fields: dict | None = None,
    recording: str | None = None,
    notes: str = "",
    dc_notch_hz: float = 0.0,
    notch_channels_hz: tuple[int, ...] = (),
) -> SweepOutcome:
    """Measure ``plan`` with ``source`` and write the sweep to ``store`` in one transaction.

    Parameters
    ----------
    keep_iq_dir : path, optional
        Keep the sweep's raw IQ as one SigMF recording (one capture per hop) in this folder.
    keep_spectra : bool, optional
        Store compact spectra per hop (:mod:`survey.spectra_codec`: about 4 KB per hop at 2048
        bins for noise inputs, about 0.4 KB thinned for antenna sweeps).
        Default: yes. The passband analysis uses the dense spectra of noise-source runs and the
        diagnosis looks for narrow lines in antenna runs; a long live survey can thin them out
        (``scan --spectra-every N``).
    recording_fields : dict, optional
        Extra fields for the recorder (device, seed, gain ...), passed as keyword arguments.
    recording : str, optional
        The recording the sweep was measured from (replay); stored in ``sweeps.recording``.
    notes : str
        Stored in ``sweeps.notes`` (e.g. a warning about few averages); a note about hops
        without signal (constant samples) is added to it.
    """
    sink = None
    if keep_iq_dir is not None:
        from survey.recorder import SweepRecorder  # sigmf is needed only when IQ is kept

        directory = Path(keep_iq_dir)
        directory.mkdir(parents=True, exist_ok=True)
        fields = dict(recording_fields or {})
        fields.setdefault("band", settings.band)
        fields.setdefault("channel_bw_hz", settings.channel_bw_hz)
        fields.setdefault("gain_db", settings.gain_db)
        fields.setdefault("ppm", settings.ppm)
        sink = SweepRecorder(
            directory,
            _recording_name(configuration, input, run_id, store.next_sequence(run_id)),
            configuration=configuration,
            input=input,
            **fields,
        )
    measured = measure_sweep(source, plan, settings, configuration, input, keep_spectra=keep_spectra, sink=sink,
                             on_hop=on_hop, should_stop=should_stop, recording=recording, notes=notes,
                             dc_notch_hz=dc_notch_hz, notch_channels_hz=notch_channels_hz)
    return store_sweep(store, run_id, measured)
