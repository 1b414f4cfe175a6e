"""Trimmer schedules: a preamp's tuned circuits changing with time, for the simulated scene.

Someone aligning a preamp turns its trimmer capacitors; each circuit's resonance (and, with
it, its loaded Q) moves. A :class:`TrimmerSchedule` describes that as keyframes: at time
``t_s`` (simulated seconds) every circuit has a resonance ``f0_hz`` and a loaded ``q``; between
keyframes both are interpolated linearly in time, before the first and after the last they are
held. The schedule only says *where the circuits are*; the response of a circuit is the tuned
circuit of :class:`survey.scene.TunedCircuit`.

TOML form, inside ``[preamp.NAME]`` (every keyframe lists the same number of circuits)::

    trimmer = [
      { t_s = 0.0,  circuits = [{ f0_hz = 92.0e6, q = 30.0 }] },
      { t_s = 10.0, circuits = [{ f0_hz = 97.0e6, q = 30.0 }] },
    ]
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from survey.errors import SceneError


@dataclass(frozen=True)
class TrimmerKeyframe:
    """Every circuit's ``(f0_hz, q)`` at simulated time ``t_s`` (seconds)."""

    t_s: float
    circuits: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class TrimmerSchedule:
    """Piecewise-linear circuit tuning against simulated time (keyframes in time order)."""

    keyframes: tuple[TrimmerKeyframe, ...]

    def __post_init__(self) -> None:
        if not self.keyframes:
            raise SceneError("trimmer: give at least one keyframe {t_s = 0, circuits = [...]}")
        n = len(self.keyframes[0].circuits)
        times = [k.t_s for k in self.keyframes]
        if any(b <= a for a, b in zip(times, times[1:])):
            raise SceneError(f"trimmer: keyframe times {times} must increase strictly; sort them")
        for k in self.keyframes:
            if len(k.circuits) != n or n == 0:
                raise SceneError(
                    f"trimmer: keyframe at t_s = {k.t_s:g} has {len(k.circuits)} circuits, the first has {n}; "
                    "every keyframe lists the same circuits"
                )

    @property
    def n_circuits(self) -> int:
        """Number of tuned circuits the schedule moves."""
        return len(self.keyframes[0].circuits)

    @property
    def end_s(self) -> float:
        """Time of the last keyframe: the tuning is constant afterwards."""
        return self.keyframes[-1].t_s

    def tuning_at(self, t_s: float) -> tuple[tuple[float, float], ...]:
        """Each circuit's ``(f0_hz, q)`` at simulated time ``t_s``: linear between keyframes, held outside."""
        t = float(t_s)
        frames = self.keyframes
        if t <= frames[0].t_s:
            return frames[0].circuits
        if t >= frames[-1].t_s:
            return frames[-1].circuits
        times = np.array([k.t_s for k in frames])
        j = int(np.searchsorted(times, t, side="right"))
        a, b = frames[j - 1], frames[j]
        u = (t - a.t_s) / (b.t_s - a.t_s)
        return tuple(
            (fa + u * (fb - fa), qa + u * (qb - qa)) for (fa, qa), (fb, qb) in zip(a.circuits, b.circuits)
        )


def _number(table: dict, key: str, where: str, minimum: float) -> float:
    value = table.get(key)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise SceneError(f"{where}: '{key}' must be a finite number, got {value!r}")
    if value < minimum:
        raise SceneError(f"{where}: '{key}' = {value} is below {minimum}; give a physical value")
    return float(value)


def parse_trimmer(raw: Any, where: str) -> TrimmerSchedule:
    """A :class:`TrimmerSchedule` from the TOML array ``trimmer = [{t_s, circuits}, ...]``."""
    if not isinstance(raw, list) or not raw:
        raise SceneError(f"{where}: trimmer must be an array of {{t_s = ..., circuits = [{{f0_hz, q}}, ...]}}")
    frames = []
    for i, item in enumerate(raw):
        here = f"{where} trimmer keyframe #{i + 1}"
        if not isinstance(item, dict) or not isinstance(item.get("circuits"), list):
            raise SceneError(f"{here}: write {{t_s = 0.0, circuits = [{{f0_hz = 94.5e6, q = 30}}]}}")
        circuits = []
        for c in item["circuits"]:
            if not isinstance(c, dict):
                raise SceneError(f"{here}: each circuit is a table {{f0_hz = ..., q = ...}}")
            circuits.append((_number(c, "f0_hz", here, 1.0), _number(c, "q", here, 0.5)))
        frames.append(TrimmerKeyframe(_number(item, "t_s", here, 0.0), tuple(circuits)))
    return TrimmerSchedule(tuple(frames))
