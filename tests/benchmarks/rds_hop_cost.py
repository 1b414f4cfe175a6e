"""Cost of reading RDS inside the survey: ms per hop of ``measure_hop`` with and without it.

Run from the source checkout::

    python tests/benchmarks/rds_hop_cost.py [--dwell-ms 100] [--rounds 5]

Renders one sweep of the SIMULATED demo scene (``recordings_demo/quorrelby_hill.toml``, bare,
2.4 MS/s) and measures every hop with emissions twice, ``decode_rds`` True and False, the two
runs interleaved hop by hop in the same process so machine load affects both alike. Prints the
median ms per hop of each, their ratio, and the stations named (PI) in that sweep.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from survey import dsp  # noqa: E402
from survey.bandplan import band_plan  # noqa: E402
from survey.records import SweepSettings  # noqa: E402
from survey.scene import load_scene  # noqa: E402
from survey.sources.simulated import SimulatedSource  # noqa: E402
from survey.sweep import plan_for_source  # noqa: E402

SCENE = ROOT / "recordings_demo" / "quorrelby_hill.toml"


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--dwell-ms", type=float, default=100.0)
    p.add_argument("--rounds", type=int, default=5)
    a = p.parse_args(argv)
    scene = load_scene(SCENE)
    source = SimulatedSource(scene, "bare", "antenna", seed=7)
    band = band_plan("europe")
    with_rds = SweepSettings(band=band.name, dwell_s=a.dwell_ms / 1e3, settle_s=0.0, sample_rate_hz=source.sample_rate_hz)
    without = replace(with_rds, decode_rds=False)
    plan = plan_for_source(band, source, with_rds)
    n = int(round(with_rds.dwell_s * source.sample_rate_hz))
    blocks = []
    for hop in plan.hops:
        source.tune(hop.center_hz)
        blocks.append((hop, source.read(n)))
    times: dict[bool, list[float]] = {True: [], False: []}
    named = []
    for rnd in range(a.rounds):
        for hop, block in blocks:
            for decode in ((True, False) if rnd % 2 == 0 else (False, True)):
                found: list = []
                t0 = time.perf_counter()
                dsp.measure_hop(block, hop.channels_hz, with_rds if decode else without, hop.index, emissions_out=found)
                times[decode].append(time.perf_counter() - t0)
                if decode and rnd == 0:
                    named += [(e.freq_hz, e.cn_db, e.rds_pi, e.rds_ps, e.rds_blocks) for e in found if e.rds_blocks]
    per_hop = {k: statistics.median(v) * 1e3 for k, v in times.items()}
    total = {k: sum(v) * 1e3 / a.rounds for k, v in times.items()}
    print(f"{len(blocks)} hops of {a.dwell_ms:.0f} ms at {source.sample_rate_hz / 1e6:.1f} MS/s, {a.rounds} rounds")
    print(f"median ms per hop: with RDS {per_hop[True]:.1f}, without {per_hop[False]:.1f}")
    print(f"ms per sweep: with RDS {total[True]:.0f}, without {total[False]:.0f} "
          f"(ratio {total[True] / total[False]:.2f})")
    n_hops = len(blocks)
    extra = [statistics.median(times[True][k::n_hops]) - statistics.median(times[False][k::n_hops])
             for k in range(n_hops)]
    decoding = [x for x in extra if x > 1e-3]
    if decoding:
        print(f"hops with a station decoded (extra > 1 ms): {len(decoding)}, extra ms per such hop "
              f"median {statistics.median(decoding) * 1e3:.1f}, max {max(decoding) * 1e3:.1f}")
    for f, cn, pi, ps, nb in named:
        print(f"  {f / 1e6:7.3f} MHz C/N {cn:5.1f} dB: {nb} block slots, PI "
              f"{'----' if pi is None else format(pi, '04X')}, PS {ps or '(none)'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
