"""Small SIMULATED survey databases for the report tests (invented scene, seeded, a few seconds).

``simulated_db`` sweeps the demo's invented scene over a narrow custom band: antenna sweeps
alternating ``bare`` / ``preamp-peaked`` ten minutes apart, then terminated, noise-hot and
noise-cold sweeps of both (ENR 15 dB in the scene). ``hostile_db`` writes known-truth sweeps
(``compare_truth``) under labels, device names and notes full of HTML.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from bandcensus.cli import main
from compare_truth import _sweep, make_truth
from survey.records import RunInfo, SweepSettings
from survey.store import SurveyStore

SCENE = Path(__file__).resolve().parent.parent / "recordings_demo" / "quorrelby_hill.toml"
BAND = "custom:92-97:100"
BAND_HZ = (92.0e6, 97.0e6)
ENR_DB = 15.0
#: Channels of BAND: 92.0 to 97.0 MHz on a 100 kHz raster.
N_CHANNELS = 51
#: A census station within this distance (Hz) of a scene carrier is that transmitter (the
#: census's own grouping distance for FM, analysis.census.SAME_FM_STATION_HZ).
MATCH_HZ = 25_000.0
#: The scene's strongest station inside BAND (-92 dBm at 93.2 MHz, quorrelby_hill.toml).
STRONGEST_HZ = 93_200_000



def scene_carriers_hz(lo_hz: float = 0.0, hi_hz: float = float("inf")) -> list[float]:
    """Carrier frequencies (Hz) of the scene's invented stations between ``lo_hz`` and ``hi_hz``."""
    with open(SCENE, "rb") as fh:
        scene = tomllib.load(fh)
    freqs = [float(st["freq_mhz"]) * 1e6 if "freq_mhz" in st else float(st["freq_hz"]) for st in scene["station"]]
    return sorted(f for f in freqs if lo_hz <= f <= hi_hz)


def match_to_scene(census_hz, carriers_hz) -> dict[float, float]:
    """``{scene carrier: census station}`` for every census station within MATCH_HZ of a carrier.

    Raises AssertionError when a census station matches no carrier or two census stations
    match the same carrier (a sideband or a phantom counted as a station).
    """
    out: dict[float, float] = {}
    for f in census_hz:
        near = [c for c in carriers_hz if abs(c - f) <= MATCH_HZ]
        assert len(near) == 1, f"census station at {f:.0f} Hz is no scene transmitter"
        assert near[0] not in out, f"two census stations for the transmitter at {near[0]:.0f} Hz"
        out[near[0]] = float(f)
    return out


HOSTILE_BASE = "<script>alert(1)</script>"
HOSTILE_TEST = "pre&amp<b>\"amp'</b> $x^2$"  # '$' would start matplotlib mathtext
HOSTILE_DEVICE = "<img src=x onerror=alert(2)>"
HOSTILE_NOTES = "</td></tr></table><h1>injected</h1>"


def simulated_db(path: Path, *, noise_runs: bool = True) -> Path:
    """Write the simulated survey to ``path`` through ``bandcensus simulate``; returns ``path``."""
    common = ["--db", str(path), "--band", BAND, "--dwell-ms", "4", "--json"]
    code = main(["simulate", str(SCENE), *common, "--alternate", "bare,preamp-peaked", "--sweeps", "6",
                 "--every", "10m", "--seed", "11"])
    if code != 0:
        raise RuntimeError(f"simulate failed with exit code {code}")
    if noise_runs:
        for inp in ("terminated", "noise-hot", "noise-cold"):
            for cfg in ("bare", "preamp-peaked"):
                code = main(["simulate", str(SCENE), *common, "--config", cfg, "--input", inp, "--sweeps", "2",
                             "--seed", "12"])
                if code != 0:
                    raise RuntimeError(f"simulate failed with exit code {code}")
    return path


def hostile_db(path: Path, *, source_kind: str = "simulated") -> Path:
    """Known-truth A/B sweeps whose labels, device and notes are HTML; returns ``path``."""
    truth = make_truth(5, n_per_side=8)
    settings = SweepSettings(band="simulated-europe", gain_db=30.0)
    items = [(t, HOSTILE_BASE, truth.base_power[k], truth.base_noise[k]) for k, t in enumerate(truth.base_s)]
    items += [(t, HOSTILE_TEST, truth.test_power[k], truth.test_noise[k]) for k, t in enumerate(truth.test_s)]
    items.sort(key=lambda x: x[0])
    with SurveyStore(path) as store:
        run = store.begin_run(RunInfo(source_kind, HOSTILE_DEVICE, "test", {"file": "<x>.sigmf-meta"}, seed=5,
                                      notes=HOSTILE_NOTES))
        for t, label, p, nz in items:
            store.write_sweep(run, _sweep(label, p, nz, t, settings))
        store.end_run(run)
    return path
