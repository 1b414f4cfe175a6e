"""Regenerate the bundled SIMULATED demo recordings (deterministic: fixed seed and schedule).

Run from the source checkout::

    python recordings_demo/generate.py

It replaces ``recordings_demo/sigmf/`` with one SigMF recording per sweep of the invented scene
``quorrelby_hill.toml``: antenna sweeps alternating bare / preamp in time (so A/B pairs exist)
for each preamp (seven pairs each, enough for the comparison's confidence intervals), then
terminated and noise-source (hot/cold, ENR 15 dB) sweeps for ``bare`` and ``preamp-staggered``.
Dwell is 5 ms per hop (12 000 samples) to keep the whole set small; the budget is checked.
Sweeps start every 60 simulated seconds, so a bare sweep and its preamp partner are a minute
apart and see nearly the same station fading.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from bandcensus import __version__  # noqa: E402
from survey.bandplan import band_plan  # noqa: E402
from survey.records import RunInfo, SweepSettings  # noqa: E402
from survey.runner import record_sweep  # noqa: E402
from survey.scene import load_scene  # noqa: E402
from survey.sources.simulated import SimulatedSource  # noqa: E402
from survey.store import SurveyStore  # noqa: E402
from survey.sweep import plan_for_source  # noqa: E402

SCENE = HERE / "quorrelby_hill.toml"
OUT = HERE / "sigmf"
SEED = 20260601
EPOCH_UTC = "2026-06-01T20:00:00Z"
DWELL_S = 0.005
INTERVAL_S = 60.0
#: Alternating bare/preamp pairs per preamp (the comparison needs at least 6 for an interval).
PAIRS_PER_PREAMP = 7
BUDGET_BYTES = 25 * 1024 * 1024

#: (configuration, input) in time order.
SCHEDULE: tuple[tuple[str, str], ...] = (
    *(
        pair
        for preamp in ("preamp-peaked", "preamp-staggered", "preamp-bench-supply")
        for _ in range(PAIRS_PER_PREAMP)
        for pair in (("bare", "antenna"), (preamp, "antenna"))
    ),
    ("bare", "terminated"), ("bare", "noise-cold"), ("bare", "noise-hot"),
    ("preamp-staggered", "terminated"), ("preamp-staggered", "noise-cold"), ("preamp-staggered", "noise-hot"),
)


def generate(out_dir: Path = OUT, n_sweeps: int | None = None) -> dict:
    """Write the recordings into ``out_dir`` (replaced); returns sizes and timing.

    ``n_sweeps`` limits the run to the first sweeps of :data:`SCHEDULE` (same code path, same
    order, so those files are byte-identical to the full set's); None renders all of them.
    """
    schedule = SCHEDULE if n_sweeps is None else SCHEDULE[: int(n_sweeps)]
    started = time.monotonic()
    # The 5 ms sweeps carry no RDS (six bits per hop, nothing a decoder could use; see
    # identification.py for the longer recordings that do): rendered without it, as always.
    scene = load_scene(SCENE).without_rds()
    source = SimulatedSource(scene, "bare", "antenna", seed=SEED, epoch_utc=EPOCH_UTC)
    band = band_plan("europe")
    settings = SweepSettings(band=band.name, dwell_s=DWELL_S, settle_s=0.0, gain_db=scene.receiver.gain_db, ppm=0)
    plan = plan_for_source(band, source, settings)
    n_hops = len(plan.hops)
    per_sweep = n_hops * 2 * int(round(DWELL_S * source.sample_rate_hz))
    if per_sweep * len(SCHEDULE) > BUDGET_BYTES:
        raise SystemExit(f"{len(SCHEDULE)} sweeps of {per_sweep} bytes exceed the {BUDGET_BYTES} byte budget")
    if out_dir.exists():
        shutil.rmtree(out_dir)
    out_dir.mkdir(parents=True)
    fields = {"device": f"SIMULATED receiver, scene '{scene.name}'", "seed": SEED,
              "description": f"SIMULATED sweep of the invented scene '{scene.name}', seed {SEED}"}
    with tempfile.TemporaryDirectory() as tmp:
        store = SurveyStore(Path(tmp) / "generate.db")
        run_id = store.begin_run(RunInfo(source_kind="simulated", device=source.describe(),
                                         tool_version=__version__, settings={"scene": SCENE.name}, seed=SEED,
                                         notes="SIMULATED demo recordings"))
        for k, (configuration, input_kind) in enumerate(schedule):
            source.set_chain(configuration, input_kind)
            start_s = source.time_s
            record_sweep(store, run_id, source, plan, settings, configuration, input_kind,
                         keep_iq_dir=out_dir, recording_fields=fields)
            source.advance(max(0.0, INTERVAL_S - (source.time_s - start_s)))
        store.end_run(run_id)
        store.close()
    files = sorted(p for p in out_dir.iterdir() if p.is_file())
    total = sum(p.stat().st_size for p in files)
    if total > BUDGET_BYTES:
        raise SystemExit(f"recordings total {total} bytes, over the {BUDGET_BYTES} byte budget")
    return {"sweeps": len(schedule), "hops_per_sweep": n_hops, "files": len(files), "bytes": total,
            "seconds": time.monotonic() - started}


if __name__ == "__main__":
    info = generate()
    print(f"{info['sweeps']} sweeps x {info['hops_per_sweep']} hops: {info['files']} files, "
          f"{info['bytes'] / 1e6:.2f} MB in {info['seconds']:.1f} s -> {OUT}")
