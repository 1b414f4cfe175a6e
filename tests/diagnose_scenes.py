"""SIMULATED scenes with one injected preamp fault each, for the diagnosis tests.

Invented stations in an invented place; nothing describes a real site or product. Levels are
chosen so that the 8-bit converter neither clips nor drowns in its own quantisation noise
(base floor about 5 dB above it) unless a test asks for clipping: the receiver's full scale
sits 56 dB above the base channel noise.
"""

from __future__ import annotations

import copy
from dataclasses import replace
from pathlib import Path
from typing import Sequence

from survey.bandplan import parse_band
from survey.records import RunInfo, SweepSettings
from survey.runner import record_sweep
from survey.scene import Scene, parse_scene
from survey.sources.simulated import SimulatedSource
from survey.store import SurveyStore
from survey.sweep import plan_for_source

BAND = "custom:94-100:100"
DWELL_S = 0.02
#: Antenna noise temperature of the scenes, K (a flat, rural-like site).
ANTENNA_K = 5000.0


def base_doc() -> dict:
    """Scene document: a broad clean preamp, a peaked one, two strong and three weaker stations.

    Base channel noise (``Ta + Tr`` = 6163 K in 200 kHz) sits at -45 dBFS, 15.7 dB above the
    8-bit quantisation noise (-60.7 dBFS in 200 kHz at 2.4 MS/s), the terminated floor
    (1453 K) 9.4 dB above it.
    """
    return {
        "scene": {"name": "diagnose-fixture", "description": "SIMULATED fault fixture"},
        "outside_noise": {"temp_k": ANTENNA_K},
        "receiver": {"nf_db": 7.0, "full_scale_dbm": -62.7, "amplitude_imbalance_db": 0.1,
                     "phase_imbalance_deg": 1.0, "ppm": 0.0},
        "preamp": {
            "clean": {"gain_db": 10.0, "nf_db": 1.0,
                      "stagger": {"center_hz": 97.0e6, "bandwidth_hz": 10.0e6, "stages": 2}},
            "peaked": {"gain_db": 10.0, "nf_db": 1.0,
                       "circuits": [{"f0_hz": 97.0e6, "q": 30.0}, {"f0_hz": 97.0e6, "q": 30.0}]},
        },
        "station": [
            {"name": "Strong One", "freq_mhz": 96.0, "level_dbm": -86.0, "stereo": True},
            {"name": "Strong Two", "freq_mhz": 96.8, "level_dbm": -86.0, "stereo": True},
            {"name": "Weak North", "freq_mhz": 94.3, "level_dbm": -98.0, "stereo": False},
            {"name": "Weak South", "freq_mhz": 99.5, "level_dbm": -98.0, "stereo": True},
            {"name": "Weak East", "freq_mhz": 98.9, "level_dbm": -99.0, "stereo": True},
        ],
    }


def scene_with(**preamps: dict) -> Scene:
    """The base scene with extra preamps (``name=table``; ``based_on`` allowed)."""
    doc = copy.deepcopy(base_doc())
    doc["preamp"].update(preamps)
    return parse_scene(doc)


def scene_from(doc: dict) -> Scene:
    """A scene from a modified document."""
    return parse_scene(copy.deepcopy(doc))


def attenuated(scene: Scene, attenuation_db: float, ambient_k: float = 290.0) -> Scene:
    """The scene seen through a matched attenuator at the antenna terminals.

    Stations drop by the attenuation; the antenna noise becomes ``Ta/L + Tamb (1 - 1/L)``
    (a matched lossy line at ambient temperature; standard result, from memory).
    """
    loss = 10.0 ** (attenuation_db / 10.0)
    ta = float(scene.antenna_temp_k) / loss + ambient_k * (1.0 - 1.0 / loss)
    return replace(scene.with_station_levels(-attenuation_db), antenna_temp_k=ta, environment=None)


def record(path: Path, runs: Sequence[tuple], *, seed: int = 1, sweeps: int = 2, band: str = BAND) -> Path:
    """Record ``runs`` = ``(scene, preamp_or_bare, label, input, keep_spectra)`` into ``path``."""
    store = SurveyStore(path)
    run_id = store.begin_run(RunInfo("simulated", "SIMULATED receiver", "0", {"fixture": "diagnose"}, seed=seed))
    plan_band = parse_band(band)
    settings = SweepSettings(band=plan_band.name, dwell_s=DWELL_S, settle_s=0.0)
    for n, (scene, chain, label, inp, keep) in enumerate(runs):
        src = SimulatedSource(scene, chain, inp, seed=seed + 17 * n)
        plan = plan_for_source(plan_band, src, settings)
        for _ in range(sweeps):
            record_sweep(store, run_id, src, plan, settings, label, inp, keep_spectra=keep)
            src.advance(30.0)
    store.end_run(run_id)
    store.close()
    return path


def hop_centers(scene: Scene, band: str = BAND) -> dict[int, float]:
    """Channel -> centre of the hop the planner measures it in (for placing images)."""
    plan_band = parse_band(band)
    settings = SweepSettings(band=plan_band.name, dwell_s=DWELL_S)
    src = SimulatedSource(scene, "bare", "antenna")
    plan = plan_for_source(plan_band, src, settings)
    return {f: h.center_hz for h in plan.hops for f in h.channels_hz}
