"""Render SIMULATED identification recordings: 0.5 s of IQ on the RDS stations of the demo scene.

Run from the source checkout::

    python recordings_demo/identification.py [--out DIR] [--seconds 0.5] [--configuration bare]
                                             [--stations 3 | --stations all] [--sample-rate-mhz 1.024]

The bundled sweeps dwell 5 ms per hop, six RDS bits: no decoder can name a station from them.
A full PS name needs four groups 0A, 416 bits, 0.35 s at 1187.5 bit/s, plus up to one group to
find the first group boundary; 0.5 s is enough. This writes one SigMF recording
``identification-<configuration>`` in ``DIR`` (default ``recordings_demo/identify/``, the
bundled one) with one capture per chosen station of ``quorrelby_hill.toml`` that sends RDS (by
default the three strongest at the antenna; ``--stations all``: every one), tuned so the
station lies ``OFFSET_HZ`` above the capture centre (clear of the receiver's DC spike, and its
whole 200 kHz channel inside the usable 75 % of the capture), and prints what
:func:`survey.rds.decode_station` reads from each capture beside the scene's truth. At the
default 1.024 MS/s (a rate the receiver offers) in cu8 each capture is 1.0 MB. Replay it like
any recording (``bandcensus replay``); ``bandcensus stations`` then names the stations.
Deterministic (fixed seed and epoch). Nothing here describes a real station.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from survey.bandplan import band_plan  # noqa: E402
from survey.dsp import to_complex64  # noqa: E402
from survey.rds import RdsResult, decode_station  # noqa: E402
from survey.recorder import SweepRecorder  # noqa: E402
from survey.scene import Station, load_scene  # noqa: E402
from survey.sources.recording import open_recording  # noqa: E402
from survey.sources.simulated import SimulatedSource  # noqa: E402

SCENE = HERE / "quorrelby_hill.toml"
OUT = HERE / "identify"
SAMPLE_RATE_HZ = 1.024e6
STRONGEST = 3
SEED = 20260602
EPOCH_UTC = "2026-06-01T19:50:00Z"
OFFSET_HZ = 250_000.0


def rds_stations(scene, strongest: int | None = None) -> list[Station]:
    """The scene's stations that send RDS (the ``strongest`` by antenna level; None: all), by frequency."""
    sending = sorted((s for s in scene.stations if s.rds_pi is not None), key=lambda s: -s.level_dbm)
    return sorted(sending[:strongest] if strongest is not None else sending, key=lambda s: s.freq_hz)


def generate(out_dir: Path = OUT, seconds: float = 0.5, configuration: str = "bare",
             strongest: int | None = STRONGEST, sample_rate_hz: float = SAMPLE_RATE_HZ) -> Path:
    """Write the identification recording; returns the path of its ``.sigmf-meta``."""
    scene = load_scene(SCENE)
    source = SimulatedSource(scene, configuration, "antenna", seed=SEED, epoch_utc=EPOCH_UTC,
                             sample_rate_hz=sample_rate_hz)
    n = int(round(seconds * source.sample_rate_hz))
    out_dir.mkdir(parents=True, exist_ok=True)
    recorder = SweepRecorder(out_dir, f"identification-{configuration}", configuration=configuration,
                             input="antenna", band=band_plan("europe").name, channel_bw_hz=200e3,
                             gain_db=scene.receiver.gain_db, device=f"SIMULATED receiver, scene '{scene.name}'",
                             seed=SEED, description=f"SIMULATED identification captures ({seconds} s per RDS "
                                                    f"station) of the invented scene '{scene.name}'")
    with recorder:
        for station in rds_stations(scene, strongest):
            source.tune(station.freq_hz - OFFSET_HZ)
            recorder.add_block(source.read(n))
    return recorder.meta_path


def decode_recording(meta_path: Path) -> list[tuple[float, RdsResult]]:
    """``(station frequency Hz, result)`` for every capture of an identification recording."""
    out = []
    with open_recording(meta_path) as rec:
        for centre, length in zip(rec.fixed_centers_hz, rec.capture_lengths()):
            rec.tune(centre)
            block = rec.read(length)
            iq = to_complex64(block.raw, block.datatype)
            out.append((centre + OFFSET_HZ, decode_station(iq, block.sample_rate_hz, OFFSET_HZ)))
    return out


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="SIMULATED identification recordings of the demo scene's RDS stations")
    p.add_argument("--out", type=Path, default=OUT)
    p.add_argument("--seconds", type=float, default=0.5)
    p.add_argument("--configuration", default="bare")
    p.add_argument("--stations", default=str(STRONGEST), help="how many of the strongest RDS stations, or 'all'")
    p.add_argument("--sample-rate-mhz", type=float, default=SAMPLE_RATE_HZ / 1e6)
    a = p.parse_args(argv)
    strongest = None if a.stations == "all" else int(a.stations)
    meta = generate(a.out, a.seconds, a.configuration, strongest, a.sample_rate_mhz * 1e6)
    truth = {round(s.freq_hz): s for s in rds_stations(load_scene(SCENE))}
    print(f"{meta} (SIMULATED)")
    for freq, r in decode_recording(meta):
        s = truth[round(freq)]
        bler = "n/a" if r.block_error_rate is None else f"{r.block_error_rate:.2f}"
        print(f"{freq / 1e6:6.1f} MHz  PI {r.pi_hex or '----'}  PS {r.ps_partial or '(none)':8}  "
              f"PTY {r.pty if r.pty is not None else '-':>2}  block errors {bler:>4}  "
              f"(sent: {s.rds_pi:04X} {s.rds_ps:8} PTY {s.rds_pty}, {s.name})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
