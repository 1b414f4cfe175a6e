"""RDS decoding of simulated stations: identity, no wrong names, block error rate, merging.

The transmitter side is survey.rds.waveform (checked against IEC 62106 in test_rds_code.py).
"No wrong names" is tested over many seeds: noise alone, FM without RDS, weak stations with RDS.
"""

from __future__ import annotations

import numpy as np
import pytest

from rds_fixtures import FS, OFFSET_HZ, PROGRAMME, noise_iq, station_iq
from survey.dsp import to_complex64
from survey.rds import RdsProgramme, RdsResult, decode_station, decode_stations, merge_rds
from survey.scene import parse_scene
from survey.sources.simulated import SimulatedSource

TRUE_SEGMENTS = {s: PROGRAMME.ps.ljust(8)[2 * s:2 * s + 2] for s in range(4)}


@pytest.mark.parametrize("stereo", [True, False])
def test_strong_station_identified_from_half_a_second(stereo):
    r = decode_station(station_iq(1, 30.0, stereo=stereo), FS, OFFSET_HZ)
    assert r.pi == 0xE3D2 and r.pi_hex == "E3D2"
    assert r.ps == "HILLTOP "
    assert r.pty == 10
    assert r.pilot_locked is stereo
    # 0.5 s = 593.75 bits: 22 whole block slots whatever the first boundary
    assert 21 <= r.blocks_received <= 22
    assert r.blocks_errored == 0 and r.block_error_rate == 0.0


def test_station_at_negative_offset_among_others():
    a = station_iq(2, 30.0, programme=RdsProgramme(0x1A2B, "EAST", 1), offset_hz=-400e3)
    b = station_iq(3, 30.0, programme=RdsProgramme(0x3C4D, "WEST", 2), offset_hz=+200e3)
    left, right = decode_stations(a + b, FS, [-400e3, 200e3])
    assert (left.pi, left.ps, left.pty) == (0x1A2B, "EAST    ", 1)
    assert (right.pi, right.ps, right.pty) == (0x3C4D, "WEST    ", 2)


def test_simulated_scene_carries_rds_through_the_8_bit_receiver():
    scene = parse_scene({
        "scene": {"name": "rds-check"},
        "receiver": {"full_scale_dbm": -62.0, "ppm": 1.2},
        "station": [
            {"name": "Test Tower", "freq_mhz": 96.3, "level_dbm": -80.0, "rds_pi": "E5B1",
             "rds_ps": "TOWER", "rds_pty": 4},
            {"name": "Silent Mast", "freq_mhz": 96.9, "level_dbm": -80.0, "stereo": False},
        ],
    })
    src = SimulatedSource(scene, "bare", "antenna", seed=11)
    src.tune(96.6e6)
    block = src.read(int(0.5 * src.sample_rate_hz))
    iq = to_complex64(block.raw, block.datatype)
    lo = src.lo_hz(96.6e6)
    tower, mast = decode_stations(iq, block.sample_rate_hz, [96.3e6 - lo, 96.9e6 - lo])
    assert (tower.pi_hex, tower.ps, tower.pty) == ("E5B1", "TOWER   ", 4)
    assert tower.block_error_rate is not None and tower.block_error_rate < 0.1
    assert mast.pi is None and mast.ps_segments == ()


def test_noise_alone_never_gives_a_code():
    # 240 seeds, 0.1 to 0.5 s each (72 s of noise in all)
    durations = np.linspace(0.1, 0.5, 5)
    for seed in range(240):
        r = decode_station(noise_iq(50_000 + seed, float(durations[seed % 5])), FS, OFFSET_HZ)
        assert r.pi is None and r.ps_segments == () and r.pty is None, seed


@pytest.mark.slow
def test_fm_without_rds_never_gives_a_code():
    # 200 seeds: stereo and mono, C/N 10 to 40 dB, 0.1 to 0.5 s
    for seed in range(200):
        iq = station_iq(60_000 + seed, 10.0 + 30.0 * (seed % 7) / 6, 0.1 + 0.1 * (seed % 5),
                        stereo=bool(seed % 2), programme=None)
        r = decode_station(iq, FS, OFFSET_HZ)
        assert r.pi is None and r.ps_segments == () and r.blocks_received == 0, seed


@pytest.mark.slow
def test_weak_stations_never_give_a_wrong_code():
    # 200 seeds from C/N 6 to 17 dB (below and through the RDS threshold), stereo and mono
    found = 0
    for seed in range(200):
        cn = 6.0 + 11.0 * (seed % 12) / 11
        r = decode_station(station_iq(70_000 + seed, cn, stereo=bool(seed % 2)), FS, OFFSET_HZ)
        assert r.pi in (None, PROGRAMME.pi), seed
        for s, text in r.ps_segments:
            assert text == TRUE_SEGMENTS[s], seed
        assert r.pty in (None, PROGRAMME.pty), seed
        found += r.pi is not None
    assert 30 < found < 200  # the range straddles the threshold: some found, some not


def test_block_error_rate_falls_as_cn_rises():
    rates = []
    for cn in (11.0, 14.0, 20.0):
        results = [decode_station(station_iq(80_000 + k, cn), FS, OFFSET_HZ) for k in range(4)]
        ident = merge_rds(results)
        rates.append(ident.block_error_rate)
    assert rates[0] is not None and rates[0] > rates[1] > rates[2]
    assert rates[2] < 0.02 and rates[0] > 0.2


def test_merge_accumulates_segments_only_under_the_confirmed_pi():
    a = RdsResult(0xE3D2, ((0, "HI"), (1, "LL")), 10, 4, 1)
    b = RdsResult(0xE3D2, ((2, "TO"), (3, "P ")), 10, 4, 0)
    other = RdsResult(0x1111, ((0, "XX"),), 3, 4, 0)
    none = RdsResult(None, (), None, 4, 4)
    ident = merge_rds([a, other, b, none])
    assert ident.pi_hex == "E3D2" and ident.ps == "HILLTOP " and ident.pty == 10
    assert ident.results == 4 and ident.results_with_pi == 2 and ident.conflicts == 1
    assert (ident.blocks_received, ident.blocks_errored) == (16, 5)
    assert ident.block_error_rate == pytest.approx(5 / 16)
    partial = merge_rds([a])
    assert partial.ps is None and partial.ps_partial == "HILL____"
    tie = merge_rds([a, other])
    assert tie.pi is None and tie.ps_segments == ()


def test_results_round_trip_through_stored_columns():
    r = RdsResult(0xE3D2, ((0, "HI"), (3, "P ")), 10, 22, 3)
    back = RdsResult.from_columns(r.pi, r.ps_partial, r.pty, r.blocks_received, r.blocks_errored)
    assert back == r and r.ps_partial == "HI____P "
    assert RdsResult.from_columns(None, None, None, 0, 0) == RdsResult(None, (), None, 0, 0)


def test_short_hops_give_pi_and_build_the_name_across_sweeps():
    # 0.1 s hops (about 119 bits: four consecutive blocks fit in about half of them)
    short = [decode_station(station_iq(90_000 + k, 30.0, 0.1), FS, OFFSET_HZ) for k in range(10)]
    assert sum(r.pi == PROGRAMME.pi for r in short) >= 3
    assert all(r.pi in (None, PROGRAMME.pi) and r.ps is None for r in short)
    # 0.2 s hops (about 237 bits: one or two whole groups each) merged over twenty sweeps
    results = [decode_station(station_iq(91_000 + k, 30.0, 0.2), FS, OFFSET_HZ) for k in range(20)]
    assert all(r.ps is None for r in results)
    ident = merge_rds(results)
    assert ident.pi == PROGRAMME.pi and ident.ps == "HILLTOP " and ident.results_with_pi == 20


def test_bad_input_is_refused():
    with pytest.raises(ValueError, match="complex"):
        decode_station(np.zeros(1000), FS, 0.0)
    with pytest.raises(ValueError, match="outside the hop"):
        decode_station(np.zeros(1000, np.complex64), FS, 1.5e6)


def test_census_helpers_decode_only_strong_emissions_inside_the_hop():
    from survey.rds.columns import STATION_COLUMNS, decode_hop_emissions, json_fields, stored_columns

    iq = station_iq(4, 30.0)
    centre = 96.0e6
    carriers = [centre + OFFSET_HZ, centre - 100e3, centre + 480e3]
    results = decode_hop_emissions(iq, FS, centre, carriers, [30.0, 6.0, 30.0])
    assert results[1] is None and results[2] is None  # too weak; too near the hop edge (512 kHz)
    cols = stored_columns(results[0])
    assert [c for c, _ in STATION_COLUMNS] == list(cols)
    assert cols["rds_pi"] == 0xE3D2 and cols["rds_ps"] == "HILLTOP " and cols["rds_blocks"] >= 21
    assert stored_columns(None)["rds_blocks"] == 0
    assert json_fields(results[0]) == {"rds_pi": "E3D2", "rds_ps": "HILLTOP ", "rds_pty": 10,
                                       "rds_block_error_rate": 0.0}
    merged = merge_rds([RdsResult.from_columns(**stored_columns(results[0]))])
    assert json_fields(merged)["rds_ps"] == "HILLTOP "
    assert json_fields(None)["rds_pi"] is None
