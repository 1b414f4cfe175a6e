"""Band plans (regional FM broadcast allocations, custom rasters) and hop planning.

Channel frequencies are integers in Hz, computed with integer arithmetic so that a raster of
hundreds of channels never drifts (``87.5 + 0.1 * n`` in floating point does).

Hop geometry
------------
A hop tuned to centre ``c`` with sample rate ``fs`` has usable spectrum

.. math:: g \\le |f - c| \\le \\eta f_s / 2

where ``eta`` is the usable fraction (the flat inner part of the receiver's passband) and ``g``
the guard around the DC spike. A channel at ``f`` of bandwidth ``B`` is measurable in the hop
when its whole band ``[f - B/2, f + B/2]`` lies inside one half of that spectrum (never across
DC), that is when

.. math:: d_{min} = g + B/2 \\le |f - c| \\le \\eta f_s / 2 - B/2 = d_{max}.

So the centres that can measure a channel form two closed intervals ``f - [d_min, d_max]`` and
``f + [d_min, d_max]``. Centres are whole hertz, so both limits are rounded inwards
(``ceil(d_min)``, ``floor(d_max)``) and every comparison afterwards is exact integer arithmetic.

Choosing the fewest hops is a hitting-set problem over those intervals. The set of channels a
centre measures changes only where a centre crosses an interval endpoint, so it is enough to
consider centres at endpoints: any centre can be slid right to the nearest right-hand endpoint
of the intervals containing it without losing a channel. The problem is then solved exactly by
a dynamic programme over those candidates (:func:`minimum_centers`).

References
----------
ITU Region 1 FM band 87.5-108 MHz, 100 kHz raster: GE84 regional agreement (ITU).
USA: 47 CFR 73.201 (channels 201-300, 88.1-107.9 MHz) and 73.501 (channel 200, 87.9 MHz).
Japan: 76-95 MHz on 100 kHz (regulator notices as reported by the trade press; an extension to
99 MHz was reported, hence the adjustable upper edge). OIRT: 65.8-74 MHz, 30 kHz spacing.
"""

from __future__ import annotations

import math
from decimal import Decimal, InvalidOperation
from fractions import Fraction
from typing import Iterable, Sequence

import numpy as np

from survey.errors import PlanError
from survey.records import BandPlan, Hop, HopPlan

#: Names accepted by :func:`band_plan` and :func:`parse_band`.
BAND_NAMES = ("europe", "americas", "japan", "oirt")

#: The command-line forms accepted by :func:`parse_band`, quoted in every parse error.
BAND_FORMS = (
    '"europe" (87.5-108.0 MHz, 100 kHz)',
    '"americas" (88.1-107.9 MHz, 200 kHz)',
    '"japan" (76.0-95.0 MHz, 100 kHz)',
    '"japan:99" (upper edge in MHz)',
    '"oirt" (65.81-73.97 MHz, 30 kHz)',
    '"custom:88-100:100" (start-stop in MHz, raster in kHz)',
)

#: First and last channel numbers of the US FM table, 47 CFR 73.201 (200 from 73.501).
AMERICAS_FIRST_CHANNEL = 200
AMERICAS_LAST_CHANNEL = 300

_AMERICAS_CH201_HZ = 88_100_000
_AMERICAS_SPACING_HZ = 200_000
_JAPAN_START_HZ = 76_000_000
_JAPAN_STOP_HZ = 95_000_000
_JAPAN_RASTER_HZ = 100_000
_BAND_TOP_HZ = 108_000_000
_MAX_CHANNELS = 200_000
_NEIGHBOURS = 8  # candidates compared each side when dropping dominated ones

_SOURCES = {
    "europe": "ITU Region 1, GE84 agreement: 87.5-108 MHz on a 100 kHz raster",
    "americas": "47 CFR 73.201: channels 201-300, f = 88.1 + 0.2 (ch - 201) MHz, 200 kHz",
    "japan": "Japan 76-95 MHz on 100 kHz (90-95 MHz added 2014, regulator notices as reported "
    "by the trade press); upper edge adjustable for the reported extension to 99 MHz",
    "oirt": "OIRT band 65.8-74 MHz, 30 kHz spacing, f = 65.81 + 0.03 n MHz",
}


# --------------------------------------------------------------------------- band plans


def _raster(start_hz: int, stop_hz: int, raster_hz: int) -> tuple[int, ...]:
    """Integer raster ``start, start + raster, ..., stop`` (stop included)."""
    return tuple(range(start_hz, stop_hz + 1, raster_hz))


def americas_channel_hz(number: int) -> int:
    """Centre frequency in Hz of US FM channel ``number`` (200-300).

    ``f = 88.1 MHz + 0.2 MHz * (number - 201)`` (47 CFR 73.201; channel 200 = 87.9 MHz is the
    non-commercial addition of 47 CFR 73.501).
    """
    if isinstance(number, bool) or not isinstance(number, (int, np.integer)):
        raise PlanError(f"channel number must be a whole number from 200 to 300, got {number!r}")
    n = int(number)
    if not AMERICAS_FIRST_CHANNEL <= n <= AMERICAS_LAST_CHANNEL:
        raise PlanError(
            f"US FM channel {n} does not exist: numbers run from {AMERICAS_FIRST_CHANNEL} "
            f"(87.9 MHz) to {AMERICAS_LAST_CHANNEL} (107.9 MHz)"
        )
    return _AMERICAS_CH201_HZ + _AMERICAS_SPACING_HZ * (n - 201)


def americas_channel_number(freq_hz: int) -> int:
    """US FM channel number (200-300) of a centre frequency in Hz, inverse of :func:`americas_channel_hz`."""
    f = int(freq_hz)
    offset = f - _AMERICAS_CH201_HZ
    if f != freq_hz or offset % _AMERICAS_SPACING_HZ:
        raise PlanError(
            f"{freq_hz / 1e6} MHz is not on the US FM raster (87.9, 88.1, ... 107.9 MHz, 200 kHz steps)"
        )
    number = 201 + offset // _AMERICAS_SPACING_HZ
    if not AMERICAS_FIRST_CHANNEL <= number <= AMERICAS_LAST_CHANNEL:
        raise PlanError(f"{f / 1e6} MHz lies outside the US FM band 87.9-107.9 MHz")
    return number


def band_plan(name: str, *, upper_hz: int | None = None) -> BandPlan:
    """A regional FM broadcast band plan.

    Parameters
    ----------
    name : str
        One of :data:`BAND_NAMES`: ``"europe"`` 87.5-108.0 MHz on 100 kHz (ITU Region 1, GE84),
        ``"americas"`` 88.1-107.9 MHz on 200 kHz (47 CFR 73.201, channels 201-300),
        ``"japan"`` 76.0-95.0 MHz on 100 kHz, ``"oirt"`` 65.81-73.97 MHz on 30 kHz.
    upper_hz : int, optional
        Japan only: the upper edge (last channel) in Hz, on the 100 kHz raster from 76.0 MHz,
        e.g. ``99_000_000`` after the reported extension. Default 95 MHz.

    Returns
    -------
    BandPlan
        ``start_hz`` and ``stop_hz`` are the first and last channel centres; ``source`` cites
        the plan.
    """
    key = str(name).strip().lower()
    if key not in BAND_NAMES:
        raise PlanError(f"unknown band {name!r}; choose one of {', '.join(BAND_NAMES)}")
    if upper_hz is not None and key != "japan":
        raise PlanError(f"upper_hz adjusts the Japanese band only; leave it out for {key!r}")
    if key == "europe":
        start, stop, raster = 87_500_000, 108_000_000, 100_000
        channels = _raster(start, stop, raster)
    elif key == "americas":
        channels = tuple(americas_channel_hz(n) for n in range(201, AMERICAS_LAST_CHANNEL + 1))
        start, stop, raster = channels[0], channels[-1], _AMERICAS_SPACING_HZ
    elif key == "japan":
        start, raster = _JAPAN_START_HZ, _JAPAN_RASTER_HZ
        stop = _JAPAN_STOP_HZ if upper_hz is None else _japan_upper(upper_hz)
        channels = _raster(start, stop, raster)
    else:  # oirt: f = 65.81 MHz + 30 kHz * n up to 73.97 MHz
        start, stop, raster = 65_810_000, 73_970_000, 30_000
        channels = _raster(start, stop, raster)
    source = _SOURCES[key]
    if key == "japan" and stop != _JAPAN_STOP_HZ:
        source += f" (upper edge set to {stop / 1e6:.1f} MHz)"
    return BandPlan(key, start, stop, raster, channels, source)


def _japan_upper(upper_hz: int) -> int:
    """Validate the adjustable upper edge of the Japanese band."""
    try:
        value = Fraction(upper_hz)
    except (TypeError, ValueError):
        raise PlanError(f"upper edge must be a frequency in Hz such as 99000000, got {upper_hz!r}")
    if value.denominator != 1 or (value - _JAPAN_START_HZ) % _JAPAN_RASTER_HZ:
        raise PlanError(
            f"upper edge {float(value) / 1e6} MHz is not on the 100 kHz raster from 76.0 MHz; "
            "use a value such as 95.0 or 99.0 MHz"
        )
    if not _JAPAN_START_HZ < value <= _BAND_TOP_HZ:
        raise PlanError(
            f"upper edge {float(value) / 1e6} MHz must lie above 76.0 MHz and at most 108.0 MHz"
        )
    return int(value)


def custom_band(start_hz: int, stop_hz: int, raster_hz: int, name: str = "custom") -> BandPlan:
    """A band of channels ``start_hz, start_hz + raster_hz, ..., stop_hz`` (integer Hz).

    ``stop_hz - start_hz`` must be a whole number of rasters, so that the stated stop is a
    channel and nothing is silently dropped.
    """
    values = []
    for label, v in (("start", start_hz), ("stop", stop_hz), ("raster", raster_hz)):
        try:
            fv = Fraction(v)
        except (TypeError, ValueError):
            raise PlanError(f"custom band {label} must be a number of Hz, got {v!r}")
        if fv.denominator != 1:
            raise PlanError(f"custom band {label} must be whole hertz, got {v!r}")
        values.append(int(fv))
    start, stop, raster = values
    if start <= 0 or raster <= 0:
        raise PlanError(f"custom band start and raster must be positive (got start {start} Hz, raster {raster} Hz)")
    if stop <= start:
        raise PlanError(f"custom band stop {stop} Hz must lie above start {start} Hz")
    span = stop - start
    if span % raster:
        lower = start + (span // raster) * raster
        raise PlanError(
            f"custom band {start / 1e6:g}-{stop / 1e6:g} MHz is not a whole number of "
            f"{raster / 1e3:g} kHz steps; stop at {lower / 1e6:g} or {(lower + raster) / 1e6:g} MHz"
        )
    if span // raster + 1 > _MAX_CHANNELS:
        raise PlanError(
            f"custom band would hold {span // raster + 1} channels (limit {_MAX_CHANNELS}); "
            "use a coarser raster or a narrower range"
        )
    source = f"custom range {start / 1e6:g}-{stop / 1e6:g} MHz on a {raster / 1e3:g} kHz raster"
    return BandPlan(name, start, stop, raster, _raster(start, stop, raster), source)


def _decimal_hz(text: str, scale: int, what: str, whole: str) -> int:
    """Parse a decimal number of MHz/kHz into whole Hz exactly (no float rounding)."""
    try:
        value = Decimal(text.strip()) * scale
    except InvalidOperation:
        raise PlanError(f"{what} {text.strip()!r} in band {whole!r} is not a number; accepted: {_forms()}")
    if not value.is_finite() or value != value.to_integral_value():
        raise PlanError(f"{what} {text.strip()!r} in band {whole!r} is not a whole number of Hz; accepted: {_forms()}")
    return int(value)


def _forms() -> str:
    return ", ".join(BAND_FORMS)


def parse_band(text: str) -> BandPlan:
    """Band plan from its command-line form.

    Accepted: ``europe``, ``americas``, ``japan``, ``japan:99`` (upper edge in MHz), ``oirt``,
    ``custom:88-100:100`` (start-stop in MHz, raster in kHz). Case and surrounding spaces are
    ignored. Anything else raises :class:`PlanError` listing the accepted forms.
    """
    if not isinstance(text, str) or not text.strip():
        raise PlanError(f"empty band; accepted: {_forms()}")
    whole = text.strip()
    head, sep, rest = whole.lower().partition(":")
    head = head.strip()
    if head in BAND_NAMES and not sep:
        return band_plan(head)
    if head == "japan" and sep:
        return band_plan("japan", upper_hz=_decimal_hz(rest, 1_000_000, "upper edge", whole))
    if head == "custom" and sep:
        range_text, sep2, raster_text = rest.partition(":")
        lo_text, sep3, hi_text = range_text.replace("\u2013", "-").partition("-")
        if not (sep2 and sep3 and lo_text.strip() and hi_text.strip() and raster_text.strip()):
            raise PlanError(f"custom band {whole!r} needs START-STOP:RASTER; accepted: {_forms()}")
        start = _decimal_hz(lo_text, 1_000_000, "start", whole)
        stop = _decimal_hz(hi_text, 1_000_000, "stop", whole)
        raster = _decimal_hz(raster_text, 1_000, "raster", whole)
        return custom_band(start, stop, raster)
    raise PlanError(f"unknown band {whole!r}; accepted: {_forms()}")


# --------------------------------------------------------------------------- hop geometry


def _check_settings(
    sample_rate_hz, usable_fraction, dc_guard_hz, channel_bw_hz
) -> tuple[int, int, Fraction, Fraction]:
    """Validate hop settings.

    Returns the integer offset limits ``(d_min, d_max)`` in Hz (rounded inwards) and the exact
    limits ``g + B/2`` and ``eta fs/2 - B/2`` as fractions (for margins).
    """
    checks = (
        ("sample_rate_hz", sample_rate_hz, "a positive sample rate such as 2400000"),
        ("usable_fraction", usable_fraction, "a fraction of the sample rate in (0, 1], e.g. 0.75"),
        ("dc_guard_hz", dc_guard_hz, "zero or a positive guard such as 20000"),
        ("channel_bw_hz", channel_bw_hz, "a positive bandwidth such as 200000"),
    )
    exact = {}
    for label, value, fix in checks:
        if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
            raise PlanError(f"{label} must be a number, got {value!r}; use {fix}")
        if not math.isfinite(float(value)):
            raise PlanError(f"{label} must be finite, got {value!r}; use {fix}")
        exact[label] = Fraction(float(value)) if isinstance(value, (float, np.floating)) else Fraction(int(value))
    if exact["sample_rate_hz"] <= 0:
        raise PlanError(f"sample_rate_hz must be positive, got {sample_rate_hz!r}; use {checks[0][2]}")
    if not 0 < exact["usable_fraction"] <= 1:
        raise PlanError(f"usable_fraction must lie in (0, 1], got {usable_fraction!r}; use {checks[1][2]}")
    if exact["dc_guard_hz"] < 0:
        raise PlanError(f"dc_guard_hz must not be negative, got {dc_guard_hz!r}; use {checks[2][2]}")
    if exact["channel_bw_hz"] <= 0:
        raise PlanError(f"channel_bw_hz must be positive, got {channel_bw_hz!r}; use {checks[3][2]}")
    half_usable = exact["usable_fraction"] * exact["sample_rate_hz"] / 2
    half_bw = exact["channel_bw_hz"] / 2
    d_min = math.ceil(exact["dc_guard_hz"] + half_bw)
    d_max = math.floor(half_usable - half_bw)
    if d_max < d_min:
        room = half_usable - exact["dc_guard_hz"]
        if room >= exact["channel_bw_hz"]:
            raise PlanError(
                f"a {float(exact['channel_bw_hz']):g} Hz channel fits one usable half only to within "
                "a hertz, leaving no whole-hertz hop centre: narrow channel_bw_hz or lower dc_guard_hz "
                "by a few Hz"
            )
        raise PlanError(
            f"a {float(exact['channel_bw_hz']) / 1e3:g} kHz channel does not fit in one half of the "
            f"usable spectrum ({float(room) / 1e3:g} kHz between the DC guard and the usable edge at "
            f"{float(exact['sample_rate_hz']) / 1e6:g} MS/s): raise sample_rate_hz or usable_fraction, "
            "lower dc_guard_hz, or narrow channel_bw_hz"
        )
    return d_min, d_max, exact["dc_guard_hz"] + half_bw, half_usable - half_bw


def _channels_array(channels_hz: Iterable[int]) -> np.ndarray:
    """Validate channel frequencies (positive whole Hz, no repeats); return them as int64."""
    values = list(channels_hz)
    out = np.empty(len(values), dtype=np.int64)
    for i, v in enumerate(values):
        if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)):
            raise PlanError(f"channel frequency must be a number of Hz, got {v!r}")
        if isinstance(v, (float, np.floating)) and not (math.isfinite(v) and float(v).is_integer()):
            raise PlanError(f"channel frequency {v!r} is not whole hertz; round the band plan to integer Hz")
        if int(v) <= 0:
            raise PlanError(f"channel frequency must be positive, got {v!r}")
        out[i] = int(v)
    if np.unique(out).size != out.size:
        raise PlanError("a channel frequency is listed twice; give each channel once")
    return out


def channel_margin_hz(freq_hz: int, center_hz: int, inner_hz: Fraction, outer_hz: Fraction) -> Fraction:
    """Distance in Hz from a channel's band to the nearer of the DC guard and the usable edge.

    With ``d = |freq - center|``, ``inner = g + B/2`` and ``outer = eta fs/2 - B/2`` the margin
    is ``min(d - inner, outer - d)``, exact; negative when the channel is not measurable.
    """
    d = abs(int(freq_hz) - int(center_hz))
    return min(d - inner_hz, outer_hz - d)


def _assign(freqs: np.ndarray, centers: np.ndarray, limits: tuple) -> np.ndarray:
    """Index of the hop that measures each channel best, -1 where none can.

    Best means the largest exact margin from both the DC guard and the usable edge
    (:func:`channel_margin_hz`); ties go to the lowest hop index. The margin
    ``min(d - inner, outer - d)`` equals ``(outer - inner)/2 - |d - (inner + outer)/2|``, so the
    best hop is the one whose ``|2 d - (inner + outer)|`` is smallest: compared in whole numbers.
    """
    d_min, d_max, inner, outer = limits
    middle = Fraction(inner) + Fraction(outer)
    num, den = middle.numerator, middle.denominator
    owner = np.full(freqs.size, -1, dtype=np.int64)
    distance = np.abs(np.subtract.outer(np.asarray(freqs, dtype=np.int64), np.asarray(centers, dtype=np.int64)))
    fits = (distance >= d_min) & (distance <= d_max)  # whole hertz: exact in int64
    center_list = centers.tolist()
    reachable = fits.sum(axis=1)
    owner[reachable == 1] = np.argmax(fits[reachable == 1], axis=1)  # one hop in reach: no margins to compare
    for i in np.flatnonzero(reachable > 1).tolist():
        f = int(freqs[i])
        owner[i] = min((abs(2 * abs(f - center_list[j]) * den - num), j) for j in np.flatnonzero(fits[i]).tolist())[1]
    return owner


# --------------------------------------------------------------------------- hop planning


def _cover_masks(freqs: np.ndarray, cands: np.ndarray, d_min: int, d_max: int) -> list[int]:
    """Bit ``i`` of mask ``j`` is set when candidate centre ``j`` measures channel ``i``."""
    masks = []
    for c in cands:
        d = np.abs(freqs - c)
        idx = np.flatnonzero((d >= d_min) & (d <= d_max))
        m = 0
        for i in idx.tolist():
            m |= 1 << i
        masks.append(m)
    return masks


def _drop_dominated(cands: np.ndarray, masks: list[int]) -> tuple[np.ndarray, list[int]]:
    """Remove candidates that measure a subset of what a nearby candidate measures.

    Exact for both objectives of :func:`minimum_centers`: a plan using a dropped candidate can
    use its dominator instead with no more centres and no fewer measurable pairs. Equal masks
    keep the lowest centre. Only neighbours are compared (a candidate's channels are two runs
    of consecutive channels, so its dominators lie close); missing a dominator only keeps a
    candidate, it never loses an optimum.
    """
    keep = []
    n = len(masks)
    for j, m in enumerate(masks):
        dominated = False
        for k in range(max(0, j - _NEIGHBOURS), min(n, j + _NEIGHBOURS + 1)):
            if k != j and (m & ~masks[k]) == 0 and (masks[k] != m or k < j):
                dominated = True
                break
        if not dominated:
            keep.append(j)
    return cands[keep], [masks[j] for j in keep]


def _prune(layer: dict[int, tuple[int, int]]) -> dict[int, tuple[int, int]]:
    """Drop partial plans dominated by another: fewer (or the same) channels left, score no worse.

    Any completion of the dominated plan also completes the dominating one with the same added
    score, so the optimum is kept. The order (score, channels left, then first found) is fixed.
    """
    if len(layer) < 2:
        return layer
    kept: list[tuple[int, tuple[int, int]]] = []
    for state, score in sorted(layer.items(), key=lambda kv: (kv[1], kv[0].bit_count())):
        if any((other & ~state) == 0 for other, _ in kept):
            continue
        kept.append((state, score))
    return dict(kept)


def minimum_centers(freqs_hz: Sequence[int], d_min_hz: int, d_max_hz: int) -> np.ndarray:
    """The fewest integer centres such that every channel lies within ``[d_min, d_max]`` of one.

    Parameters
    ----------
    freqs_hz : sequence of int
        Channel frequencies in Hz, ascending, no repeats.
    d_min_hz, d_max_hz : int
        Closed range of ``|f - c|`` in which a channel is measurable (see the module notes).

    Returns
    -------
    numpy.ndarray
        Sorted centres (int64), as few as possible.

    Notes
    -----
    Exact dynamic programme over the candidate centres ``f +- d_min`` and ``f +- d_max``
    (interval endpoints; an optimum exists among them, see the module notes), taken in
    ascending order. After candidate ``j`` has been taken or skipped, the state is the set of
    channels not yet measured. Two partial plans with the same state have the same possible
    completions, so only the better one is kept; a state that still holds a channel no later
    candidate can reach (``f + d_max`` below the next candidate) is dropped. Every plan is
    therefore represented, and the best final state (nothing left) is optimal. Candidates that
    measure a subset of another's channels, and partial plans that leave a superset of another's
    channels at no better score, are dropped (both exact), which keeps the state count small
    (tens for the regional plans).

    Partial plans are compared by (number of centres, minus the number of (channel, centre)
    pairs that are measurable): among plans with the fewest hops, the one in which channels are
    measurable in the most hops in total wins, which gives the assignment the most choice.
    Remaining ties keep the plan found first in the fixed order (skip before take), so the
    result depends only on the input.
    """
    freqs = np.asarray(freqs_hz, dtype=np.int64)
    ends = np.concatenate([freqs - d_max_hz, freqs - d_min_hz, freqs + d_min_hz, freqs + d_max_hz])
    cands = np.unique(ends)
    masks = _cover_masks(freqs, cands, d_min_hz, d_max_hz)
    cands, masks = _drop_dominated(cands, masks)
    following = np.append(cands[1:], np.iinfo(np.int64).max)
    # channels with index below n_dead[j] can no longer be reached once candidate j is passed
    n_dead = np.searchsorted(freqs, following - d_max_hz, side="left")
    states: dict[int, tuple[int, int]] = {(1 << freqs.size) - 1: (0, 0)}
    parents: list[dict[int, tuple[int, bool]]] = []
    for j, mask in enumerate(masks):
        dead = (1 << int(n_dead[j])) - 1
        gain = -mask.bit_count()
        layer: dict[int, tuple[int, int]] = {}
        links: dict[int, tuple[int, bool]] = {}
        for state, (count, spread) in states.items():
            for took, nxt, score in (
                (False, state, (count, spread)),
                (True, state & ~mask, (count + 1, spread + gain)),
            ):
                if nxt & dead:
                    continue
                best = layer.get(nxt)
                if best is None or score < best:
                    layer[nxt] = score
                    links[nxt] = (state, took)
        states = _prune(layer)
        parents.append(links)
    if 0 not in states:  # unreachable when every channel has a candidate; kept as a guard
        raise PlanError("the hop planner could not cover every channel; report this with the settings used")
    chosen = []
    state = 0
    for j in range(len(masks) - 1, -1, -1):
        state, took = parents[j][state]
        if took:
            chosen.append(int(cands[j]))
    return np.asarray(sorted(chosen), dtype=np.int64)


def plan_hops(
    channels_hz: Iterable[int],
    sample_rate_hz: float,
    usable_fraction: float = 0.75,
    dc_guard_hz: float = 20_000.0,
    channel_bw_hz: float = 200_000.0,
) -> HopPlan:
    """The fewest hops that measure every channel, each channel assigned to exactly one hop.

    Parameters
    ----------
    channels_hz : iterable of int
        Channel centre frequencies in whole Hz (any order, no repeats).
    sample_rate_hz : float
        Receiver sample rate in Hz (complex samples per second).
    usable_fraction : float
        Fraction of ``sample_rate_hz`` treated as flat, usable spectrum, in (0, 1].
    dc_guard_hz : float
        Half-width in Hz excluded around the hop centre (the DC spike).
    channel_bw_hz : float
        Channel integration bandwidth in Hz; the whole band must be usable.

    Returns
    -------
    HopPlan
        Hops sorted by centre (integer Hz), indices 0..n-1; every channel is in the hop where it
        sits farthest from both the DC guard and the usable edge (ties: lower centre).

    Raises
    ------
    PlanError
        Invalid settings, no channels, or a channel bandwidth wider than one usable half.
    """
    limits = _check_settings(sample_rate_hz, usable_fraction, dc_guard_hz, channel_bw_hz)
    d_min, d_max = limits[:2]
    freqs = np.sort(_channels_array(channels_hz))
    if freqs.size == 0:
        raise PlanError("no channels to plan; choose a band with at least one channel")
    centers = minimum_centers(freqs, d_min, d_max)
    owner = _assign(freqs, centers, limits)
    if np.any(owner < 0):  # cannot happen for an exact cover; guard against a solver fault
        raise PlanError("the hop planner left a channel uncovered; report this with the settings used")
    return _hop_plan(freqs, centers, owner, sample_rate_hz, usable_fraction, dc_guard_hz, channel_bw_hz)


def assign_to_centers(
    channels_hz: Iterable[int],
    centers_hz: Sequence[float],
    sample_rate_hz: float,
    usable_fraction: float,
    dc_guard_hz: float,
    channel_bw_hz: float,
) -> HopPlan:
    """Assign channels to fixed hop centres (e.g. the captures of a recording, in capture order).

    Hop ``i`` is capture ``i`` (repeated centres allowed); hops that measure no channel are kept
    with empty ``channels_hz`` so indices match captures. Each channel that fits a capture's usable
    spectrum goes to exactly one capture, the one where it sits farthest from both the DC guard
    and the usable edge (ties: the earlier capture); the others are listed in ``uncovered_hz``.
    Centres are rounded to whole Hz for :class:`~survey.records.Hop`; the fit is judged on the
    rounded centre.

    Raises
    ------
    PlanError
        Invalid settings, no centres, a centre that is not a positive finite frequency, or a
        channel bandwidth wider than one usable half.
    """
    limits = _check_settings(sample_rate_hz, usable_fraction, dc_guard_hz, channel_bw_hz)
    freqs = np.sort(_channels_array(channels_hz))
    centres_list = list(centers_hz)
    if not centres_list:
        raise PlanError("no capture centres given; the recording must hold at least one capture")
    rounded = []
    for i, c in enumerate(centres_list):
        if isinstance(c, bool) or not isinstance(c, (int, float, np.integer, np.floating)) or not (
            math.isfinite(float(c)) and float(c) > 0
        ):
            raise PlanError(f"capture {i} has centre {c!r}; every capture needs a positive frequency in Hz")
        rounded.append(int(round(c)))
    centers = np.asarray(rounded, dtype=np.int64)
    owner = _assign(freqs, centers, limits)
    return _hop_plan(freqs, centers, owner, sample_rate_hz, usable_fraction, dc_guard_hz, channel_bw_hz)


def _hop_plan(freqs: np.ndarray, centers: np.ndarray, owner: np.ndarray, sample_rate_hz: float,
              usable_fraction: float, dc_guard_hz: float, channel_bw_hz: float) -> HopPlan:
    """The :class:`HopPlan` for channels ``freqs`` assigned to hop ``owner`` (-1: uncovered)."""
    hops = tuple(
        Hop(i, int(c), tuple(int(f) for f in freqs[owner == i])) for i, c in enumerate(centers)
    )
    return HopPlan(
        sample_rate_hz=float(sample_rate_hz),
        usable_fraction=float(usable_fraction),
        dc_guard_hz=float(dc_guard_hz),
        channel_bw_hz=float(channel_bw_hz),
        hops=hops,
        uncovered_hz=tuple(int(f) for f in freqs[owner < 0]),
    )
