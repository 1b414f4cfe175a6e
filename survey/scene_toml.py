"""Reading a scene from TOML (standard library :mod:`tomllib`) into :class:`survey.scene.Scene`.

Layout (see ``recordings_demo/quorrelby_hill.toml``): ``[scene]`` name and description;
``[outside_noise]`` ``environment`` (ITU-R P.372 curve) or ``temp_k``; ``[termination]``
``temp_k``; ``[noise_source]`` ``enr_db`` or ``enr_table = [[freq_hz, enr_db], ...]``;
``[receiver]``; ``[preamp.NAME]`` with ``circuits = [{f0_hz, q}, ...]`` or ``stagger = {center_hz,
bandwidth_hz, stages}``, ``gain_db``, ``nf_db``, optional ``iip3_dbm``, ``supply_noise_k``,
``oscillation = {freq_hz, level_dbm}``, ``based_on = "OTHER"`` (inherit, then override) and
``trimmer = [{t_s, circuits = [{f0_hz, q}, ...]}, ...]`` (tuning against time, :mod:`survey.trimmer`);
``[[station]]`` with ``name``, ``freq_hz`` or ``freq_mhz``, ``level_dbm``, ``stereo`` and
``fading = {time_constant_s, spread_db}``, and for a station sending RDS ``rds_pi`` (hex text),
``rds_ps`` and ``rds_pty``. Every malformed entry raises SceneError naming the fix.
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path
from typing import Any

from survey.errors import SceneError
from survey.scene import (
    BARE,
    ITU_ENVIRONMENTS,
    Fading,
    NoiseSource,
    Oscillation,
    Preamp,
    Receiver,
    Scene,
    Station,
    TunedCircuit,
    stagger_tuned_circuits,
)
from survey.trimmer import parse_trimmer


def _num(table: dict, key: str, where: str, default: Any = ..., minimum: float | None = None) -> Any:
    if key not in table:
        if default is ...:
            raise SceneError(f"{where}: missing '{key}'; add {key} = <number>")
        return default
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise SceneError(f"{where}: '{key}' must be a number, got {value!r}")
    if not math.isfinite(value):
        raise SceneError(f"{where}: '{key}' must be finite, got {value!r}")
    if minimum is not None and value < minimum:
        raise SceneError(f"{where}: '{key}' = {value} is below {minimum}; give a physical value")
    return float(value)


def _parse_station(t: dict, i: int) -> Station:
    where = f"station #{i + 1}"
    if not isinstance(t, dict):
        raise SceneError(f"{where}: expected a table [[station]] with name, freq_hz and level_dbm")
    name = str(t.get("name", f"station-{i + 1}"))
    where = f"station '{name}'"
    if "freq_hz" in t:
        f = _num(t, "freq_hz", where, minimum=1.0)
    elif "freq_mhz" in t:
        f = _num(t, "freq_mhz", where, minimum=1e-6) * 1e6
    else:
        raise SceneError(f"{where}: missing frequency; add freq_hz = 94.5e6 (or freq_mhz = 94.5)")
    fad = t.get("fading", {})
    if not isinstance(fad, dict):
        raise SceneError(f"{where}: fading must be a table {{time_constant_s = ..., spread_db = ...}}")
    fading = Fading(
        time_constant_s=_num(fad, "time_constant_s", where + " fading", 600.0, minimum=1e-3),
        spread_db=_num(fad, "spread_db", where + " fading", 0.0, minimum=0.0),
    )
    return Station(
        name=name,
        freq_hz=f,
        level_dbm=_num(t, "level_dbm", where),
        stereo=bool(t.get("stereo", True)),
        fading=fading,
        deviation_hz=_num(t, "deviation_hz", where, 75_000.0, minimum=0.0),
        **_parse_rds(t, where),
    )


def _parse_rds(t: dict, where: str) -> dict:
    """``rds_pi`` ("C3A1" hex text or an integer), ``rds_ps`` (<= 8 characters), ``rds_pty`` (0..31)."""
    if "rds_pi" not in t:
        if "rds_ps" in t or "rds_pty" in t:
            raise SceneError(f"{where}: rds_ps or rds_pty without rds_pi; add rds_pi = \"C3A1\" (a 16-bit hex code)")
        return {}
    raw = t["rds_pi"]
    try:
        pi = int(raw, 16) if isinstance(raw, str) else int(raw)
    except (TypeError, ValueError):
        pi = -1
    if isinstance(raw, bool) or not 0 <= pi <= 0xFFFF:
        raise SceneError(f"{where}: rds_pi = {raw!r} is not a 16-bit code; write it as hex text, e.g. rds_pi = \"C3A1\"")
    ps = str(t.get("rds_ps", ""))
    if len(ps) > 8 or any(not 0x20 <= ord(ch) <= 0x7D or ch in "$^`" for ch in ps):
        raise SceneError(f"{where}: rds_ps = {ps!r}; give at most 8 letters, digits, spaces or plain punctuation")
    pty = t.get("rds_pty", 0)
    if isinstance(pty, bool) or not isinstance(pty, int) or not 0 <= pty <= 31:
        raise SceneError(f"{where}: rds_pty = {pty!r}; give a programme type code 0..31")
    return {"rds_pi": pi, "rds_ps": ps, "rds_pty": pty}


def _resolve_preamp(name: str, raw_all: dict, seen: tuple[str, ...] = ()) -> dict:
    """The preamp table with ``based_on`` inheritance applied (its own keys win)."""
    t = raw_all[name]
    if not isinstance(t, dict):
        raise SceneError(f"preamp '{name}': expected a table [preamp.{name}]")
    if "based_on" not in t:
        return dict(t)
    base_name = str(t["based_on"])
    if base_name not in raw_all or base_name in seen or base_name == name:
        raise SceneError(
            f"preamp '{name}': based_on = '{base_name}' names no other preamp of the scene "
            "(or makes a loop); name an existing [preamp.NAME]"
        )
    merged = _resolve_preamp(base_name, raw_all, seen + (name,))
    merged.update({k: v for k, v in t.items() if k != "based_on"})
    return merged


def _parse_preamp(name: str, raw_all: dict) -> Preamp:
    where = f"preamp '{name}'"
    t = _resolve_preamp(name, raw_all)
    trimmer = parse_trimmer(t["trimmer"], where) if "trimmer" in t else None
    if trimmer is not None and "circuits" not in t and "stagger" not in t:
        t["circuits"] = [{"f0_hz": f0, "q": q} for f0, q in trimmer.tuning_at(trimmer.keyframes[0].t_s)]
    if "stagger" in t:
        s = t["stagger"]
        if not isinstance(s, dict):
            raise SceneError(f"{where}: stagger must be a table {{center_hz, bandwidth_hz, stages}}")
        circuits = stagger_tuned_circuits(
            _num(s, "center_hz", where + " stagger", minimum=1.0),
            _num(s, "bandwidth_hz", where + " stagger", minimum=1.0),
            int(_num(s, "stages", where + " stagger", 3, minimum=1)),
        )
    else:
        raw_c = t.get("circuits")
        if not isinstance(raw_c, list) or not raw_c:
            raise SceneError(
                f"{where}: give circuits = [{{f0_hz = 94.5e6, q = 36}}, ...] (1-3 tuned circuits) "
                "or a stagger table"
            )
        circuits = tuple(
            TunedCircuit(_num(c, "f0_hz", where, minimum=1.0), _num(c, "q", where, minimum=0.5))
            for c in raw_c
        )
    if not 1 <= len(circuits) <= 3:
        raise SceneError(f"{where}: {len(circuits)} tuned circuits; use 1 to 3")
    if trimmer is not None and trimmer.n_circuits != len(circuits):
        raise SceneError(f"{where}: the trimmer moves {trimmer.n_circuits} circuits but the preamp has "
                         f"{len(circuits)}; list the same circuits in both")
    osc = None
    if "oscillation" in t:
        o = t["oscillation"]
        if not isinstance(o, dict):
            raise SceneError(f"{where}: oscillation must be a table {{freq_hz, level_dbm}}")
        osc = Oscillation(_num(o, "freq_hz", where + " oscillation", minimum=1.0),
                          _num(o, "level_dbm", where + " oscillation"))
    iip3 = t.get("iip3_dbm")
    return Preamp(
        name=name,
        circuits=circuits,
        gain_db=_num(t, "gain_db", where),
        nf_db=_num(t, "nf_db", where, minimum=0.0),
        iip3_dbm=None if iip3 is None else _num(t, "iip3_dbm", where),
        supply_noise_k=_num(t, "supply_noise_k", where, 0.0, minimum=0.0),
        oscillation=osc,
        trimmer=trimmer,
    )


def parse_scene(data: dict, name: str = "scene") -> Scene:
    """Build a :class:`Scene` from a decoded TOML document (see ``recordings_demo/*.toml``)."""
    meta = data.get("scene", {})
    scene_name = str(meta.get("name", name))
    stations_raw = data.get("station", [])
    if not isinstance(stations_raw, list):
        raise SceneError("stations must be an array of tables: write [[station]] before each one")
    stations = tuple(_parse_station(t, i) for i, t in enumerate(stations_raw))
    outside = data.get("outside_noise", {"environment": "rural"})
    env, ta = None, None
    if "temp_k" in outside:
        ta = _num(outside, "temp_k", "outside_noise", minimum=0.0)
    else:
        env = str(outside.get("environment", "rural"))
        if env not in ITU_ENVIRONMENTS:
            raise SceneError(
                f"outside_noise: unknown environment '{env}'; use one of "
                f"{', '.join(repr(e) for e in ITU_ENVIRONMENTS)} or give temp_k"
            )
    r = data.get("receiver", {})
    dc = r.get("dc_offset", [0.004, -0.003])
    if not (isinstance(dc, list) and len(dc) == 2):
        raise SceneError("receiver: dc_offset must be [i, q] in full-scale units, e.g. [0.004, -0.003]")
    receiver = Receiver(
        nf_db=_num(r, "nf_db", "receiver", 7.0, minimum=0.0),
        gain_db=_num(r, "gain_db", "receiver", 29.7),
        full_scale_dbm=_num(r, "full_scale_dbm", "receiver", -57.0),
        dc_offset=(float(dc[0]), float(dc[1])),
        amplitude_imbalance_db=_num(r, "amplitude_imbalance_db", "receiver", 0.1),
        phase_imbalance_deg=_num(r, "phase_imbalance_deg", "receiver", 1.0),
        ppm=_num(r, "ppm", "receiver", 0.0),
        rolloff_start_fraction=_num(r, "rolloff_start_fraction", "receiver", 0.8, minimum=0.1),
        rolloff_edge_db=_num(r, "rolloff_edge_db", "receiver", 30.0, minimum=0.0),
    )
    if receiver.rolloff_start_fraction >= 1.0:
        raise SceneError("receiver: rolloff_start_fraction must be below 1 (fraction of fs/2)")
    raw_pre = data.get("preamp", {})
    if BARE in raw_pre:
        raise SceneError("preamp: 'bare' is reserved for the chain without preamp; rename that preamp")
    preamps = {n: _parse_preamp(n, raw_pre) for n in raw_pre}
    ns = data.get("noise_source", {})
    table = ns.get("enr_table", [])
    try:
        enr_table = tuple(sorted((float(a), float(b)) for a, b in table))
    except (TypeError, ValueError):
        raise SceneError("noise_source: enr_table must be [[freq_hz, enr_db], ...]") from None
    noise_source = NoiseSource(enr_db=_num(ns, "enr_db", "noise_source", 15.0), enr_table=enr_table)
    term = data.get("termination", {})
    return Scene(
        name=scene_name,
        stations=stations,
        receiver=receiver,
        preamps=preamps,
        environment=env,
        antenna_temp_k=ta,
        ambient_temp_k=_num(term, "temp_k", "termination", 290.0, minimum=0.0),
        noise_source=noise_source,
        description=str(meta.get("description", "")),
    )


def load_scene(path: str | Path) -> Scene:
    """Read a scene TOML file; SceneError (with the fix) when it is missing or malformed."""
    p = Path(path)
    if not p.is_file():
        raise SceneError(f"scene file {p} does not exist; give a .toml scene such as recordings_demo/scene.toml")
    try:
        with p.open("rb") as fh:
            data = tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise SceneError(f"scene file {p} is not valid TOML ({exc}); fix the line it names") from exc
    return parse_scene(data, name=p.stem)
