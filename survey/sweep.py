"""One sweep: a hop plan measured with an IQ source into typed hop and channel readings.

The engine is the same for a live receiver, a SigMF replay and a simulated scene, so their
results are comparable. It never touches the database; :mod:`survey.schedule` and the command
line hand the :class:`~survey.records.SweepResult` to :class:`~survey.store.SurveyStore`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Protocol

from survey import dsp
from survey.bandplan import assign_to_centers, plan_hops
from survey.errors import PlanError
from survey.noise_floor import local_noise_floors, sweep_floors
from survey.records import (
    BandPlan,
    ChannelReading,
    EmissionReading,
    HopPlan,
    HopReading,
    IQBlock,
    SweepResult,
    SweepSettings,
)
from survey.sources.base import IQSource
from survey.store import utc_now


class BlockSink(Protocol):
    """Receives each hop's raw block (e.g. the SigMF writer behind ``--keep-iq``)."""

    def add_block(self, block: IQBlock) -> None: ...


@dataclass(frozen=True)
class HopProgress:
    """What the progress callback is told after each hop."""

    hop_index: int
    n_hops: int
    center_hz: float
    floor_dbfs_hz: float


def plan_for_source(band: BandPlan, source: IQSource, settings: SweepSettings) -> HopPlan:
    """Hop plan for ``source``: the fewest hops for a tunable source, or the recording's captures.

    Raises :class:`PlanError` when not one channel of the band can be measured.
    """
    fixed = source.fixed_centers_hz
    if fixed is None:
        plan = plan_hops(
            band.channels_hz,
            sample_rate_hz=source.sample_rate_hz,
            usable_fraction=settings.usable_fraction,
            dc_guard_hz=settings.dc_guard_hz,
            channel_bw_hz=settings.channel_bw_hz,
        )
    else:
        plan = assign_to_centers(
            band.channels_hz,
            centers_hz=fixed,
            sample_rate_hz=source.sample_rate_hz,
            usable_fraction=settings.usable_fraction,
            dc_guard_hz=settings.dc_guard_hz,
            channel_bw_hz=settings.channel_bw_hz,
        )
    if not plan.channels_hz:
        raise PlanError(
            f"no channel of band '{band.name}' ({band.start_hz / 1e6:.2f}-{band.stop_hz / 1e6:.2f} MHz) "
            "fits in the usable spectrum; choose the band the recording covers (--band)"
        )
    return plan


def run_sweep(
    source: IQSource,
    plan: HopPlan,
    settings: SweepSettings,
    configuration: str,
    input: str,
    *,
    sink: BlockSink | None = None,
    keep_psd: bool = False,
    on_hop: Callable[[HopProgress], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    sweep_floor: bool = True,
) -> SweepResult:
    """Measure every hop of ``plan`` with ``source``.

    Parameters
    ----------
    source : IQSource
        Tuned hop by hop; for a recording, ``plan`` must come from its capture centres.
    settings : SweepSettings
        Dwell (``dwell_s``), FFT size, channel bandwidth and detection margin.
    sink : BlockSink, optional
        Gets every raw block (to keep IQ as SigMF).
    should_stop : callable, optional
        Checked between hops; when it returns True the sweep ends early and is returned with
        ``complete=False`` (never stored as if complete).
    sweep_floor : bool
        Measure in two passes: every hop's PSD and floor groups first, then every hop against
        its part of one floor fitted to the free stretches of all hops on absolute frequency
        (:func:`survey.noise_floor.sweep_floors`), so a channel at a crowded hop edge is
        measured against a floor bridged between both neighbouring hops instead of one
        extrapolated from one side. Blocks are kept in memory until the sweep ends. False:
        each hop's own floor (:func:`survey.noise_floor.local_noise_floor`). The hops' own floors
        are fitted together (:func:`survey.noise_floor.local_noise_floors`): for a recording once
        every hop is read, for a tuned source each as it arrives.

    Returns
    -------
    SweepResult
        Hop and channel readings and the emissions found in each hop
        (:func:`survey.emissions.find_emissions`, each reported by one hop); times from the source's block timestamps (UTC).
    """
    hops: list[HopReading] = []
    channels: list[ChannelReading] = []
    emissions: list[EmissionReading] = []
    started = None
    ended = None
    complete = True
    dwell_samples = None if source.fixed_centers_hz is not None else max(
        settings.fft_size, int(round(settings.dwell_s * source.sample_rate_hz))
    )
    blocks: list[tuple[object, IQBlock]] = []
    groups: list = []
    first_pass: list = []  # (offsets, PSD, own floor) per hop, so the second pass reuses them
    pending: list = []  # hops whose own floors are not fitted yet: fitted together

    def fit_pending() -> None:
        spectra = [dsp.hop_spectrum(block, settings) for _, block in pending]
        own = local_noise_floors(
            [s.offsets_hz for s in spectra], [s.psd for s in spectra], [s.usable for s in spectra],
            effective_averages=[s.effective_averages for s in spectra], groups_out=groups,
        )
        for (hop, _), spectrum, floor in zip(pending, spectra, own):
            first_pass.append((spectrum.offsets_hz, spectrum.psd, floor))
            if on_hop is not None:
                on_hop(HopProgress(hop.index, len(plan.hops), hop.center_hz,
                                   dsp.floor_level_dbfs_hz(floor, spectrum.usable)))
        pending.clear()

    for hop in plan.hops:
        if should_stop is not None and should_stop():
            complete = False
            break
        source.tune(hop.center_hz)
        block = source.read(dwell_samples)
        if started is None:
            started = block.started_utc
        if sink is not None:
            sink.add_block(block)
        blocks.append((hop, block))
        pending.append((hop, block))
        ended = dsp.block_end_utc(block)
        if source.fixed_centers_hz is None:  # a tuned source: each hop's floor as it arrives
            fit_pending()
    if pending:  # a recording: every hop is at hand, the floors are fitted together
        fit_pending()
    # second pass: every hop measured against its part of one floor fitted to the whole sweep
    given = [None] * len(blocks)
    if sweep_floor and blocks:
        given = sweep_floors(groups, [float(b.center_hz) for _, b in blocks], [f[0] for f in first_pass])
    for k, (hop, block) in enumerate(blocks):
        offsets, psd, own_floor = first_pass[k]
        hop_reading, channel_readings = dsp.measure_hop(
            block, hop.channels_hz, settings, hop_index=hop.index, keep_psd=keep_psd,
            emissions_out=emissions, floor_given=own_floor if given[k] is None else given[k],
            psd_given=(offsets, psd),
        )
        hops.append(hop_reading)
        channels.extend(channel_readings)
    if len(hops) != len(plan.hops):
        complete = False
    now = utc_now()
    return SweepResult(
        configuration=configuration,
        input=input,
        started_utc=started or now,
        ended_utc=ended or now,
        settings=settings,
        hops=tuple(hops),
        channels=tuple(channels),
        complete=complete,
        emissions=tuple(sorted(emissions, key=lambda e: e.freq_hz)),
    )
