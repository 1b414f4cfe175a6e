"""Band plans against the published allocations, and the command-line band syntax.

Sources (see REFERENCES.md, "FM broadcast band plans"):
- ITU Region 1, GE84 agreement: 87.5-108 MHz on a 100 kHz raster [C].
- 47 CFR 73.201: channels 201-300 = 88.1-107.9 MHz, f = 88.1 + 0.2 (ch - 201) MHz [C];
  47 CFR 73.501: channel 200 = 87.9 MHz (non-commercial) [C].
- Japan: 76-95 MHz on 100 kHz; reported extension to 99 MHz [C: regulator notices as reported
  by the trade press].
- OIRT: 65.8-74 MHz, 30 kHz spacing [C]; f = 65.81 + 0.03 n MHz [D].
Counts are recomputed here from those formulas with exact decimal arithmetic, not copied.
"""

from __future__ import annotations

from decimal import Decimal

import pytest

from survey.bandplan import (
    BAND_NAMES,
    americas_channel_hz,
    americas_channel_number,
    band_plan,
    custom_band,
    parse_band,
)
from survey.errors import PlanError


def mhz(text: str) -> int:
    """Exact MHz string to integer Hz (independent of the module's own parser)."""
    value = Decimal(text) * 1_000_000
    assert value == value.to_integral_value()
    return int(value)


def decimal_raster(start_mhz: str, stop_mhz: str, step_khz: str) -> list[int]:
    """Raster recomputed in Decimal MHz: start + n * step while <= stop."""
    start, stop, step = Decimal(start_mhz), Decimal(stop_mhz), Decimal(step_khz) / 1000
    out, n = [], 0
    while start + n * step <= stop:
        out.append(int((start + n * step) * 1_000_000))
        n += 1
    return out


def test_band_names():
    assert BAND_NAMES == ("europe", "americas", "japan", "oirt")


def test_europe_matches_ge84():
    # GE84 (ITU Region 1): 87.5-108 MHz, 100 kHz raster -> (108.0-87.5)/0.1 + 1 = 206 channels.
    plan = band_plan("europe")
    expected = decimal_raster("87.5", "108.0", "100")
    assert len(expected) == int((Decimal("108.0") - Decimal("87.5")) / Decimal("0.1")) + 1 == 206
    assert list(plan.channels_hz) == expected
    assert (plan.start_hz, plan.stop_hz, plan.raster_hz) == (87_500_000, 108_000_000, 100_000)
    assert "GE84" in plan.source


def test_americas_matches_47cfr73_201():
    # 47 CFR 73.201: channel 201 = 88.1 MHz, 300 = 107.9 MHz, 200 kHz apart -> 100 channels.
    plan = band_plan("americas")
    expected = [int((Decimal("88.1") + Decimal("0.2") * (ch - 201)) * 1_000_000) for ch in range(201, 301)]
    assert len(plan.channels_hz) == 300 - 201 + 1 == 100
    assert list(plan.channels_hz) == expected
    assert americas_channel_hz(201) == mhz("88.1")
    assert americas_channel_hz(300) == mhz("107.9")
    assert americas_channel_hz(250) == mhz("97.9")  # 88.1 + 0.2 * 49 [D]
    assert plan.raster_hz == 200_000
    assert "73.201" in plan.source


def test_americas_channel_200_and_inverse():
    # 47 CFR 73.501 adds channel 200 at 87.9 MHz for non-commercial use.
    assert americas_channel_hz(200) == mhz("87.9")
    for ch in range(200, 301):
        assert americas_channel_number(americas_channel_hz(ch)) == ch
    with pytest.raises(PlanError, match="200"):
        americas_channel_hz(199)
    with pytest.raises(PlanError, match="300"):
        americas_channel_hz(301)
    with pytest.raises(PlanError, match="raster"):
        americas_channel_number(mhz("88.0"))
    with pytest.raises(PlanError, match="outside"):
        americas_channel_number(mhz("108.1"))


def test_japan_default_and_adjustable_edge():
    # Japan 76-95 MHz on 100 kHz -> (95-76)/0.1 + 1 = 191 channels.
    plan = band_plan("japan")
    assert list(plan.channels_hz) == decimal_raster("76.0", "95.0", "100")
    assert len(plan.channels_hz) == 191
    # Reported extension to 99 MHz: (99-76)/0.1 + 1 = 231 channels.
    wide = band_plan("japan", upper_hz=99_000_000)
    assert list(wide.channels_hz) == decimal_raster("76.0", "99.0", "100")
    assert len(wide.channels_hz) == 231
    assert wide.stop_hz == 99_000_000 and "99.0" in wide.source
    assert band_plan("japan", upper_hz=90_000_000).channels_hz[-1] == 90_000_000


@pytest.mark.parametrize("upper", [99_050_000, 76_000_000, 75_000_000, 120_000_000, 99.5e6 + 0.5])
def test_japan_edge_rejected(upper):
    with pytest.raises(PlanError, match="upper edge"):
        band_plan("japan", upper_hz=upper)


def test_upper_edge_only_for_japan():
    with pytest.raises(PlanError, match="Japanese band only"):
        band_plan("europe", upper_hz=99_000_000)


def test_oirt_formula():
    # OIRT: f = 65.81 + 0.03 n MHz up to 73.97 MHz -> (73.97-65.81)/0.03 + 1 = 273 channels.
    plan = band_plan("oirt")
    n_max = (Decimal("73.97") - Decimal("65.81")) / Decimal("0.03")
    assert n_max == n_max.to_integral_value()
    expected = [int((Decimal("65.81") + Decimal("0.03") * n) * 1_000_000) for n in range(int(n_max) + 1)]
    assert len(expected) == 273
    assert list(plan.channels_hz) == expected
    assert plan.raster_hz == 30_000
    # inside the published band edges 65.8-74 MHz
    assert mhz("65.8") <= plan.channels_hz[0] and plan.channels_hz[-1] <= mhz("74.0")


@pytest.mark.parametrize("name", BAND_NAMES)
def test_plans_are_integer_ascending_on_raster(name):
    plan = band_plan(name)
    assert all(type(f) is int for f in plan.channels_hz)
    diffs = {b - a for a, b in zip(plan.channels_hz, plan.channels_hz[1:])}
    assert diffs == {plan.raster_hz}
    assert plan.channels_hz[0] == plan.start_hz and plan.channels_hz[-1] == plan.stop_hz
    assert plan.name == name and plan.source


def test_float_drift_avoided():
    # A raster summed in binary floating point drifts; the plan must hold the exact integers.
    assert band_plan("europe").channels_hz[3] == 87_800_000
    assert band_plan("europe").channels_hz[-1] == 108_000_000
    assert band_plan("oirt").channels_hz[100] == 68_810_000  # 65.81 + 3.00 MHz [D]


def test_unknown_band():
    with pytest.raises(PlanError, match="europe, americas, japan, oirt"):
        band_plan("mars")


# --------------------------------------------------------------------------- custom


def test_custom_band():
    plan = custom_band(88_000_000, 100_000_000, 100_000)
    assert len(plan.channels_hz) == 121
    assert plan.channels_hz[0] == 88_000_000 and plan.channels_hz[-1] == 100_000_000
    assert plan.name == "custom" and "88-100 MHz" in plan.source
    named = custom_band(90_000_000, 90_400_000, 200_000, name="local")
    assert named.channels_hz == (90_000_000, 90_200_000, 90_400_000) and named.name == "local"


@pytest.mark.parametrize(
    "args, match",
    [
        ((100_000_000, 88_000_000, 100_000), "above start"),
        ((88_000_000, 100_000_000, 0), "positive"),
        ((0, 100_000_000, 100_000), "positive"),
        ((88_000_000, 100_050_000, 100_000), "stop at 100 or 100.1 MHz"),
        ((88_000_000.5, 100_000_000, 100_000), "whole hertz"),
        ((1, 10_000_000, 1), "limit"),
        (("x", 100_000_000, 100_000), "number of Hz"),
    ],
)
def test_custom_band_errors(args, match):
    with pytest.raises(PlanError, match=match):
        custom_band(*args)


# --------------------------------------------------------------------------- parse_band


@pytest.mark.parametrize("name", BAND_NAMES)
def test_parse_named(name):
    assert parse_band(name) == band_plan(name)
    assert parse_band(f"  {name.upper()} ") == band_plan(name)


def test_parse_japan_edge():
    assert parse_band("japan:99") == band_plan("japan", upper_hz=99_000_000)
    assert parse_band("japan:93.5").stop_hz == 93_500_000


def test_parse_custom():
    plan = parse_band("custom:88-100:100")
    assert plan == custom_band(88_000_000, 100_000_000, 100_000)
    # decimal MHz and kHz are parsed exactly (no float rounding): 12.5 kHz raster
    fine = parse_band("custom:88.1-88.2:12.5")
    assert fine.channels_hz[1] == 88_112_500 and fine.channels_hz[-1] == 88_200_000


@pytest.mark.parametrize(
    "text",
    ["", "   ", "europa", "japan:", "japan:abc", "custom", "custom:88-100", "custom:88:100",
     "custom:-100:100", "custom:88-100:", "custom:88-100:0.0001", "oirt:70"],
)
def test_parse_errors_list_forms(text):
    with pytest.raises(PlanError) as info:
        parse_band(text)
    message = str(info.value)
    assert "custom:88-100:100" in message and "japan:99" in message, message


def test_parse_error_from_plan_checks():
    with pytest.raises(PlanError, match="upper edge"):
        parse_band("japan:99.05")
    with pytest.raises(PlanError, match="above start"):
        parse_band("custom:100-88:100")
