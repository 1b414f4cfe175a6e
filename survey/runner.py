"""Measure one sweep and store it: the step shared by replay, simulate and scan.

:func:`record_sweep` runs :func:`survey.sweep.run_sweep`, optionally keeps the raw IQ as a
SigMF recording, and writes the result in one transaction. A sweep that ended early (stop
request) is stored with ``complete = 0`` and never as complete; a sweep that raised is not
stored at all (the caller records the gap).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable

from survey.records import HopPlan, SweepResult, SweepSettings
from survey.sources.base import IQSource
from survey.store import SurveyStore
from survey.sweep import HopProgress, run_sweep


@dataclass(frozen=True)
class SweepOutcome:
    """What :func:`record_sweep` stored: the sweep id, the result and the recording (if kept)."""

    sweep_id: int
    result: SweepResult
    recording_path: Path | None


def _recording_name(configuration: str, input: str, run_id: int, sequence: int) -> str:
    safe = "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in f"{configuration}_{input}")
    return f"run{run_id:04d}_sweep{sequence:05d}_{safe}"


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
) -> SweepOutcome:
    """Measure ``plan`` with ``source`` and write the sweep to ``store`` in one transaction.

    Parameters
    ----------
    keep_iq_dir : path, optional
        Keep the sweep's raw IQ as one SigMF recording (one capture per hop) in this folder.
    keep_spectra : bool, optional
        Store compact spectra per hop (int16 centi-dB, about 4 KB per hop at 2048 bins).
        Default: yes. The passband analysis uses the dense spectra of noise-source runs and the
        diagnosis looks for narrow lines in antenna runs; a long live survey can thin them out
        (``scan --spectra-every N``).
    recording_fields : dict, optional
        Extra fields for the recorder (device, seed, gain ...), passed as keyword arguments.
    recording : str, optional
        The recording the sweep was measured from (replay); stored in ``sweeps.recording``.
    """
    if keep_spectra is None:
        keep_spectra = True
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
    try:
        result = run_sweep(
            source, plan, settings, configuration, input,
            sink=sink, keep_psd=keep_spectra, on_hop=on_hop, should_stop=should_stop,
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
    sweep_id = store.write_sweep(run_id, result, keep_spectra=keep_spectra)
    return SweepOutcome(sweep_id=sweep_id, result=result, recording_path=recording_path)
