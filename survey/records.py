"""Typed, frozen records passed between the capture modules and stored in the database.

Units are in the names: ``_hz`` hertz, ``_s`` seconds, ``_dbfs`` dB relative to full scale
(a complex exponential of amplitude 1.0 is 0 dBFS), ``_dbfs_hz`` dBFS per hertz, ``_db`` a ratio.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

#: Input labels: what the receiver's input sees during a sweep.
INPUT_KINDS = ("antenna", "terminated", "noise-hot", "noise-cold", "generator")


@dataclass(frozen=True)
class BandPlan:
    """A set of broadcast channels on a raster.

    ``channels_hz`` are the raster (centre) frequencies in Hz, ascending integers.
    """

    name: str
    start_hz: int
    stop_hz: int
    raster_hz: int
    channels_hz: tuple[int, ...]
    source: str = ""


@dataclass(frozen=True)
class Hop:
    """One tuning of the receiver and the channels measured in it."""

    index: int
    center_hz: int
    channels_hz: tuple[int, ...]


@dataclass(frozen=True)
class HopPlan:
    """Hop centres covering a band, each channel measured in exactly one hop.

    Usable spectrum of a hop is ``|f - center| <= usable_fraction * sample_rate_hz / 2`` and
    ``|f - center| >= dc_guard_hz``; every channel's whole band ``freq +- channel_bw_hz/2`` lies in it.
    """

    sample_rate_hz: float
    usable_fraction: float
    dc_guard_hz: float
    channel_bw_hz: float
    hops: tuple[Hop, ...]
    uncovered_hz: tuple[int, ...] = ()

    @property
    def channels_hz(self) -> tuple[int, ...]:
        """All channels measured by the plan, ascending."""
        return tuple(sorted(f for h in self.hops for f in h.channels_hz))


@dataclass(frozen=True)
class IQBlock:
    """Raw samples of one hop as the source delivered them.

    ``raw`` keeps the native datatype (``cu8``: interleaved uint8 I,Q; ``ci8``: int8;
    ``ci16_le``: int16; ``cf32_le``: float32), so clipping can be counted at the rails and the
    bytes can be kept as a SigMF recording unchanged. Convert with :func:`survey.dsp.to_complex64`.
    """

    center_hz: float
    sample_rate_hz: float
    datatype: str
    raw: np.ndarray
    started_utc: str

    @property
    def n_samples(self) -> int:
        """Number of complex samples."""
        return int(self.raw.size // 2)


@dataclass(frozen=True)
class ChannelReading:
    """One channel measured in one sweep.

    ``power_dbfs`` is P (signal plus noise integrated over the channel bandwidth), ``noise_dbfs``
    is N = N0 * B (the local floor times the bandwidth), ``cn_db`` is 10 log10((P - N)/N), the
    carrier-to-noise ratio (called SNR in the tool's output), or None when not received.
    """

    freq_hz: int
    hop_index: int
    power_dbfs: float
    noise_dbfs: float
    noise_density_dbfs_hz: float
    cn_db: float | None
    received: bool


@dataclass(frozen=True)
class EmissionReading:
    """One emission found above the local floor in one hop of one sweep.

    ``freq_hz`` is the carrier estimate; ``occupied_bw_hz`` the 99 % power bandwidth (ITU-R
    SM.328 / SM.443); ``power_dbfs`` its own power plus the noise in its channel, ``C + N`` (a
    neighbour's skirt removed; the same sense as a channel row's P, so ``(P - N) / N`` is C/N
    for both); ``noise_dbfs`` the local floor times the channel bandwidth; ``cn_db`` =
    10 log10(own power C / N), kept even below the detection margin (NaN when C <= 0); ``ci_db`` its own power over the neighbour power left in its
    channel (None: no neighbour power); ``kind`` is ``"fm"`` (broadcast) or ``"narrow"``
    (carrier, spur, supply line); ``channel_freq_hz`` the raster channel it sits on;
    ``separable`` False when a neighbour is too close for its own power to be measured.

    RDS (IEC 62106) read from the hop's IQ (:mod:`survey.rds`; FM emissions at C/N >= 10 dB
    wholly inside the hop): ``rds_pi`` the confirmed programme identification code, ``rds_ps``
    the programme service name as far as read (``_`` per missing character), ``rds_pty`` the
    programme type; ``rds_blocks`` block slots read and ``rds_block_errors`` of them failed
    (both 0 when not decoded or not synchronised). None where nothing was read.
    """

    freq_hz: float
    hop_index: int
    kind: str
    occupied_bw_hz: float
    power_dbfs: float
    noise_dbfs: float
    cn_db: float
    ci_db: float | None
    stereo: bool
    channel_freq_hz: int
    separable: bool = True
    rds_pi: int | None = None
    rds_ps: str | None = None
    rds_pty: int | None = None
    rds_blocks: int = 0
    rds_block_errors: int = 0


@dataclass(frozen=True)
class HopReading:
    """One hop measured in one sweep."""

    index: int
    center_hz: float
    sample_rate_hz: float
    n_samples: int
    clip_fraction: float | None
    floor_dbfs_hz: float
    started_utc: str
    psd_freqs_hz: np.ndarray | None = field(default=None, repr=False, compare=False)
    psd_dbfs_hz: np.ndarray | None = field(default=None, repr=False, compare=False)


@dataclass(frozen=True)
class SweepSettings:
    """How one sweep is measured (identical for every sweep that is to be compared)."""

    band: str
    channel_bw_hz: float = 200_000.0
    sample_rate_hz: float = 2_400_000.0
    usable_fraction: float = 0.75
    dc_guard_hz: float = 20_000.0
    dwell_s: float = 0.1
    settle_s: float = 0.02
    fft_size: int = 2048
    gain_db: float | None = None
    ppm: int = 0
    received_margin_db: float = 3.0
    #: Decode RDS of the FM emissions of each hop (see :func:`survey.dsp.measure_hop`).
    decode_rds: bool = True


@dataclass(frozen=True)
class SweepResult:
    """Everything measured in one sweep, written to the database in one transaction."""

    configuration: str
    input: str
    started_utc: str
    ended_utc: str
    settings: SweepSettings
    hops: tuple[HopReading, ...]
    channels: tuple[ChannelReading, ...]
    complete: bool = True
    emissions: tuple[EmissionReading, ...] = ()
    recording: str | None = None
    notes: str = ""


@dataclass(frozen=True)
class RunInfo:
    """One invocation of scan, replay or simulate (a run holds one or more sweeps)."""

    source_kind: str
    device: str
    tool_version: str
    settings: dict
    seed: int | None = None
    notes: str = ""
