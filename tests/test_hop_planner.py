"""Hop planner: coverage, one hop per channel, determinism and exact minimality.

The checks restate the hop geometry of DESIGN.md ("Hop"): usable spectrum of a hop at centre c
is g <= |f - c| <= usable_fraction * fs / 2, and a channel's whole band f +- B/2 must lie in one
half of it. They are written with exact fractions, independently of the planner's own integer
limits. Minimality is checked against brute force over *every* integer centre (not only the
interval endpoints the planner uses) on small cases, and against scipy's HiGHS integer
programme (scipy.optimize.milp) on two regional plans.
"""

from __future__ import annotations

import itertools
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import Bounds, LinearConstraint, milp

from survey.bandplan import assign_to_centers, band_plan, plan_hops
from survey.errors import PlanError


def measurable(freq_hz, center_hz, fs, frac, guard, bw) -> bool:
    """Whole band of the channel inside one half of the usable spectrum (exact arithmetic)."""
    f, c = Fraction(freq_hz), Fraction(center_hz)
    half_usable = Fraction(frac) * Fraction(fs) / 2
    lo, hi = f - Fraction(bw) / 2, f + Fraction(bw) / 2
    upper_half = lo - c >= Fraction(guard) and hi - c <= half_usable
    lower_half = c - hi >= Fraction(guard) and c - lo <= half_usable
    return upper_half or lower_half


def margin(freq_hz, center_hz, fs, frac, guard, bw) -> Fraction:
    """Distance of the channel's band from the nearer of the DC guard and the usable edge."""
    d = abs(Fraction(freq_hz) - Fraction(center_hz))
    return min(d - Fraction(bw) / 2 - Fraction(guard), Fraction(frac) * Fraction(fs) / 2 - d - Fraction(bw) / 2)


def check_plan(plan, channels, fs, frac, guard, bw):
    """Coverage, exactly-once, tie-break and ordering properties of a plan from plan_hops."""
    assert sorted(plan.channels_hz) == sorted(channels)  # each channel exactly once
    assert plan.uncovered_hz == ()
    centres = [h.center_hz for h in plan.hops]
    assert centres == sorted(centres) and len(set(centres)) == len(centres)
    assert [h.index for h in plan.hops] == list(range(len(plan.hops)))
    for hop in plan.hops:
        assert isinstance(hop.center_hz, int)
        for f in hop.channels_hz:
            assert measurable(f, hop.center_hz, fs, frac, guard, bw)
            # never across DC: both band edges on the same side of the centre
            assert (f - bw / 2 - hop.center_hz) * (f + bw / 2 - hop.center_hz) >= 0
            # tie-break: no other hop measures it with a larger margin; ties go to the lower index
            mine = margin(f, hop.center_hz, fs, frac, guard, bw)
            for other in plan.hops:
                if other.index == hop.index or not measurable(f, other.center_hz, fs, frac, guard, bw):
                    continue
                theirs = margin(f, other.center_hz, fs, frac, guard, bw)
                assert theirs < mine or (theirs == mine and other.index > hop.index)


def brute_force_minimum(channels, fs, frac, guard, bw, limit):
    """Smallest number of integer centres covering all channels, searching sizes < limit.

    Every integer centre from min(f) - fs to max(f) + fs is tried (no centre farther away can
    measure anything); centres with identical coverage are merged and covered-subset ones
    dropped, which cannot change the minimum. Returns None when no size below ``limit`` works.
    """
    f = np.asarray(channels)
    cands = np.arange(f.min() - int(fs) - 1, f.max() + int(fs) + 2)
    distance = np.abs(f[:, None] - cands[None, :])
    table = np.array([measurable(d, 0, fs, frac, guard, bw) for d in range(int(distance.max()) + 1)])
    cover = table[distance]  # measurable() depends on |f - c| only
    masks = {sum(1 << i for i in np.flatnonzero(col)) for col in cover.T}
    masks.discard(0)
    maximal = [m for m in masks if not any(m != o and (m & ~o) == 0 for o in masks)]
    full = (1 << f.size) - 1
    for k in range(1, limit):
        for combo in itertools.combinations(maximal, k):
            acc = 0
            for m in combo:
                acc |= m
            if acc == full:
                return k
    return None


# small problems in hertz-scale units so brute force over every integer centre is cheap
small_case = st.fixed_dictionaries(
    {
        "fs": st.integers(200, 1200),
        "frac": st.sampled_from([0.5, 0.6, 0.75, 0.9, 1.0]),
        "guard": st.integers(0, 30),
        "bw_share": st.floats(0.05, 1.0),
        "channels": st.lists(st.integers(1000, 2600), min_size=1, max_size=6, unique=True),
    }
)


def realise(case):
    half = Fraction(case["frac"]) * case["fs"] / 2 - case["guard"]
    bw = max(1, int(float(half) * case["bw_share"]))
    if bw > half:
        bw = int(half)
    return case["channels"], case["fs"], case["frac"], case["guard"], bw


@settings(max_examples=60, deadline=None)
@given(small_case)
def test_small_plans_cover_and_are_minimal(case):
    channels, fs, frac, guard, bw = realise(case)
    bw = max(bw, 1)
    if not any(measurable(d, 0, fs, frac, guard, bw) for d in range(fs)):
        # no whole-hertz centre can measure a channel (B wider than a usable half, or within 1 Hz)
        with pytest.raises(PlanError, match="channel_bw_hz"):
            plan_hops(channels, fs, frac, guard, bw)
        return
    plan = plan_hops(channels, fs, frac, guard, bw)
    check_plan(plan, channels, fs, frac, guard, bw)
    k = len(plan.hops)
    assert brute_force_minimum(channels, fs, frac, guard, bw, limit=k) is None, "a smaller plan exists"


@settings(max_examples=40, deadline=None)
@given(
    st.integers(0, 10_000),
    st.sampled_from([1_024_000, 2_048_000, 2_400_000]),
    st.sampled_from([0.6, 0.75, 0.8]),
    st.sampled_from([0.0, 10_000.0, 20_000.0]),
    st.sampled_from([100_000.0, 180_000.0, 200_000.0]),
)
def test_random_channel_sets_covered_and_deterministic(seed, fs, frac, guard, bw):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 40))
    channels = sorted({int(x) for x in rng.integers(87_500, 108_000, n) * 1000})
    plan = plan_hops(channels, fs, frac, guard, bw)
    check_plan(plan, channels, fs, frac, guard, bw)
    shuffled = list(channels)
    rng.shuffle(shuffled)
    assert plan_hops(shuffled, fs, frac, guard, bw) == plan  # same input set, same plan


@pytest.mark.parametrize("name", ["europe", "americas", "japan", "oirt"])
def test_regional_plans_at_defaults(name):
    channels = band_plan(name).channels_hz
    plan = plan_hops(channels, 2_400_000)
    check_plan(plan, channels, 2_400_000, 0.75, 20_000, 200_000)
    assert plan_hops(channels, 2_400_000) == plan
    # lower bound from capacity: each half of a hop holds floor(680 kHz / raster) + 1 channels
    raster = band_plan(name).raster_hz
    per_hop = 2 * ((900_000 - 20_000 - 200_000) // raster + 1)
    assert len(plan.hops) >= -(-len(channels) // per_hop)


def milp_minimum(channels, fs, frac, guard, bw):
    """Reference: exact 0/1 set cover by scipy.optimize.milp (HiGHS) over endpoint centres."""
    f = np.asarray(channels, dtype=np.int64)
    d_min = int(np.ceil(guard + bw / 2))
    d_max = int(np.floor(frac * fs / 2 - bw / 2))
    cands = np.unique(np.concatenate([f - d_max, f - d_min, f + d_min, f + d_max]))
    d = np.abs(f[:, None] - cands[None, :])
    a = ((d >= d_min) & (d <= d_max)).astype(float)
    res = milp(np.ones(cands.size), constraints=[LinearConstraint(a, 1, np.inf)],
               integrality=np.ones(cands.size), bounds=Bounds(0, 1))
    assert res.status == 0
    return int(round(res.fun))


@pytest.mark.parametrize("name, fs", [("americas", 2_400_000), ("americas", 1_024_000), ("oirt", 2_400_000)])
def test_hop_count_matches_integer_programme(name, fs):
    # europe and japan at 2.4 MS/s agree too (18 and 16 hops) but HiGHS needs ~40-60 s for them;
    # see tests/benchmarks/bench_hop_planner.py.
    channels = band_plan(name).channels_hz
    assert len(plan_hops(channels, fs).hops) == milp_minimum(channels, fs, 0.75, 20_000.0, 200_000.0)


def test_europe_hop_count_at_2_4_msps():
    # Exact minimum found by the planner and confirmed by the HiGHS programme (benchmark script).
    assert len(plan_hops(band_plan("europe").channels_hz, 2_400_000).hops) == 18


def test_hand_worked_single_hop():
    # fs = 2.4 MS/s, 0.75 usable -> +-900 kHz; guard 20 kHz; B = 200 kHz -> |f - c| in [120, 800] kHz.
    # Channels 100.0 and 101.0 MHz: one centre at 100.5 MHz puts both 500 kHz from it.
    plan = plan_hops([100_000_000, 101_000_000], 2_400_000)
    assert len(plan.hops) == 1
    c = plan.hops[0].center_hz
    assert 100_200_000 <= c <= 100_880_000 and all(120_000 <= abs(f - c) <= 800_000 for f in (100_000_000, 101_000_000))
    # 100.0 and 100.1 MHz cannot straddle DC (100 kHz apart, the gap is 240 kHz) but share one
    # half: a centre in [99.4, 99.88] MHz puts both 120-800 kHz above it.
    assert len(plan_hops([100_000_000, 100_100_000], 2_400_000).hops) == 1
    # 1.61 MHz apart: exceeds 2 x 800 kHz, two hops are needed.
    assert len(plan_hops([100_000_000, 101_610_000], 2_400_000).hops) == 2


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"sample_rate_hz": 0}, "sample_rate_hz"),
        ({"sample_rate_hz": -1e6}, "sample_rate_hz"),
        ({"sample_rate_hz": float("nan")}, "finite"),
        ({"usable_fraction": 0.0}, "usable_fraction"),
        ({"usable_fraction": 1.5}, "usable_fraction"),
        ({"dc_guard_hz": -1.0}, "dc_guard_hz"),
        ({"channel_bw_hz": 0.0}, "channel_bw_hz"),
        ({"channel_bw_hz": 900_000.0}, "narrow channel_bw_hz"),
        ({"sample_rate_hz": 250_000}, "raise sample_rate_hz"),
    ],
)
def test_invalid_settings(kwargs, match):
    args = {"sample_rate_hz": 2_400_000, "usable_fraction": 0.75, "dc_guard_hz": 20_000.0,
            "channel_bw_hz": 200_000.0}
    args.update(kwargs)
    with pytest.raises(PlanError, match=match):
        plan_hops([100_000_000], **args)
    with pytest.raises(PlanError, match=match):
        assign_to_centers([100_000_000], [100_500_000], **args)


@pytest.mark.parametrize(
    "channels, match",
    [([], "no channels"), ([100_000_000, 100_000_000], "twice"), ([100_000_000.5], "whole hertz"),
     ([-5], "positive"), (["100e6"], "number")],
)
def test_invalid_channels(channels, match):
    with pytest.raises(PlanError, match=match):
        plan_hops(channels, 2_400_000)


# --------------------------------------------------------------------------- fixed centres


def test_assign_to_fixed_centres():
    channels = band_plan("europe").channels_hz
    centres = [90_000_000.0, 95_000_000.0, 90_000_000.0, 200_000_000.0, 100_000_000.0]
    plan = assign_to_centers(channels, centres, 2_400_000, 0.75, 20_000.0, 200_000.0)
    assert [h.index for h in plan.hops] == [0, 1, 2, 3, 4]
    assert [h.center_hz for h in plan.hops] == [90_000_000, 95_000_000, 90_000_000, 200_000_000, 100_000_000]
    assert plan.hops[2].channels_hz == ()  # duplicate of capture 0: ties go to the earlier capture
    assert plan.hops[3].channels_hz == ()  # far away, kept so indices match captures
    measured = plan.channels_hz
    assert len(measured) == len(set(measured))
    assert sorted(measured + plan.uncovered_hz) == list(channels)
    for hop in plan.hops:
        for f in hop.channels_hz:
            assert measurable(f, hop.center_hz, 2_400_000, 0.75, 20_000, 200_000)
    for f in plan.uncovered_hz:
        assert not any(measurable(f, c, 2_400_000, 0.75, 20_000, 200_000) for c in centres)
    # around 90 MHz: 89.2-89.8 and 90.2-90.8 MHz measurable (|f - c| in [120, 800] kHz)
    assert plan.hops[0].channels_hz == tuple(range(89_200_000, 89_800_001, 100_000)) + tuple(
        range(90_200_000, 90_800_001, 100_000))
    assert 90_000_000 in plan.uncovered_hz  # on DC of the 90 MHz captures


def test_assign_reproduces_planned_assignment():
    channels = band_plan("japan").channels_hz
    plan = plan_hops(channels, 2_400_000)
    again = assign_to_centers(channels, [h.center_hz for h in plan.hops], 2_400_000, 0.75, 20_000.0, 200_000.0)
    assert again == plan


def test_assign_errors():
    with pytest.raises(PlanError, match="at least one capture"):
        assign_to_centers([100_000_000], [], 2_400_000, 0.75, 20_000.0, 200_000.0)
    with pytest.raises(PlanError, match="capture 1"):
        assign_to_centers([100_000_000], [100e6, float("nan")], 2_400_000, 0.75, 20_000.0, 200_000.0)
