"""Absolute levels: dBFS to dBm at the receiver input from a generator of known level.

A *generator sweep* (input label ``generator``) is a sweep taken with a signal generator of
known output level connected to the receiver input (through a cable whose loss is included in
the level given). For each generator tone found, the calibration stores the offset

.. math:: \\mathrm{offset}(f) = L_\\mathrm{dBm}(f) - 10 \\log_{10}(P - N)\\ [\\mathrm{dBFS}]

where ``P - N`` is the channel power above the local noise floor (the tone alone). Any level in
dBFS measured at the same receiver gain then converts as ``dBm = dBFS + offset(f)``, with the
offset interpolated linearly in frequency between calibration points and held at the end values
outside them (:meth:`Calibration.covers` says where that happens). A calibration is valid only
at the receiver gain of its generator sweeps: :meth:`Calibration.check_gain` refuses any other.

The same offset applies to a power in a channel (``_dbfs``) and to a density (``_dbfs_hz``): both
scale by the same full-scale power. Levels are at the receiver input; with a preamp in the chain
the level at the antenna terminals is lower by the preamp's gain.

Units and conversions
---------------------
* dBm: power relative to 1 mW.
* dBµV: the RMS voltage across the 50 ohm input relative to 1 µV (a terminal voltage, not the
  open-circuit EMF, which is 6.02 dB higher). From ``P = V^2 / R``:
  ``dBµV = dBm + 10 log10(R / 1 ohm) + 90`` = ``dBm + 106.99`` at 50 ohm (derived here; the
  rounded "dBm + 107" is the figure of the trade).
* Noise density in dBm/Hz is shown beside the thermal density ``k T0 = -173.975 dBm/Hz``
  (k from the SI Brochure, 9th ed.; T0 = 290 K, IEEE Std 161); the difference is the noise
  factor of everything seen at the receiver input, ``10 log10(T / T0)`` with ``T`` its noise
  temperature.
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import asdict, dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterable, Mapping, Sequence

import numpy as np

from analysis.errors import BadParameterError, MismatchError, NoDataError
from survey.store import list_sweeps, open_for_reading, read_channel_matrix, read_hops
from survey.units import T0_K, ratio_to_db, thermal_noise_dbm_per_hz

#: Input resistance of the receiver, ohm (RTL2832U-family receivers and test equipment: 50 ohm).
INPUT_OHMS = 50.0
#: ``dBµV - dBm`` at 50 ohm: ``10 log10(50) + 90`` = 106.99 dB (derived from ``P = V^2/R``).
DBUV_MINUS_DBM_50_OHM = 10.0 * math.log10(INPUT_OHMS) + 90.0
#: Thermal noise density ``k T0`` in dBm/Hz (-173.975; k exact, SI Brochure; T0 = 290 K).
KT0_DBM_HZ = thermal_noise_dbm_per_hz(T0_K)
#: Receiver gains closer than this (dB) count as the same setting.
GAIN_TOLERANCE_DB = 0.05
#: Largest fraction of samples at the ADC rails in a generator hop before the level is refused
#: as too high (common practice, no source: one sample in a thousand).
MAX_CLIP_FRACTION = 1e-3
#: Sweeps whose tone is within this of the strongest sweep at that frequency are averaged (dB).
_REPEAT_WINDOW_DB = 3.0
#: Format tag and version of the calibration file.
FILE_FORMAT = "bandcensus-calibration"
FILE_VERSION = 1


def dbm_to_dbuv(dbm, ohms: float = INPUT_OHMS):
    """Power in dBm to RMS terminal voltage in dBµV across ``ohms`` (``dBm + 10 log10(R) + 90``)."""
    return np.asarray(dbm, dtype=np.float64) + 10.0 * math.log10(ohms) + 90.0


def dbuv_to_dbm(dbuv, ohms: float = INPUT_OHMS):
    """RMS terminal voltage in dBµV across ``ohms`` to power in dBm."""
    return np.asarray(dbuv, dtype=np.float64) - 10.0 * math.log10(ohms) - 90.0


def _fmt_gain(gain_db: float | None) -> str:
    return "automatic/unrecorded" if gain_db is None else f"{gain_db:g} dB"


@dataclass(frozen=True)
class CalibrationPoint:
    """One generator tone: where, the level given, what was measured and the resulting offset.

    ``offset_db`` is ``level_dbm - tone_dbfs``; ``spread_db`` the standard deviation of the
    offset over the sweeps averaged (0 with one sweep); ``cn_db`` the tone's C/N.
    """

    freq_hz: float
    level_dbm: float
    tone_dbfs: float
    offset_db: float
    spread_db: float
    cn_db: float
    sweeps: int


@dataclass(frozen=True)
class Calibration:
    """dBFS to dBm at the receiver input, per frequency, at one receiver gain."""

    gain_db: float
    configuration: str
    points: tuple[CalibrationPoint, ...]
    sweep_ids: tuple[int, ...]
    channel_bw_hz: float
    sample_rate_hz: float
    created_utc: str
    level_source: str

    @property
    def freqs_hz(self) -> np.ndarray:
        """Frequencies of the calibration points, ascending, Hz."""
        return np.asarray([p.freq_hz for p in self.points], dtype=np.float64)

    def offset_db_at(self, freq_hz) -> np.ndarray | float:
        """``dBm - dBFS`` at ``freq_hz``: linear in frequency between points, end values held outside."""
        f = np.asarray(freq_hz, dtype=np.float64)
        out = np.interp(f, self.freqs_hz, np.asarray([p.offset_db for p in self.points]))
        return out if out.ndim else float(out)

    def covers(self, freq_hz) -> np.ndarray | bool:
        """True where ``freq_hz`` lies between the first and last calibration points (inclusive)."""
        f = np.asarray(freq_hz, dtype=np.float64)
        out = (f >= self.freqs_hz[0]) & (f <= self.freqs_hz[-1])
        return out if out.ndim else bool(out)

    def check_gain(self, gain_db: float | None, what: str = "these sweeps") -> None:
        """Refuse levels taken at another receiver gain (:class:`MismatchError` naming the remedy)."""
        if gain_db is None or abs(float(gain_db) - self.gain_db) > GAIN_TOLERANCE_DB:
            raise MismatchError(
                f"the calibration was made at receiver gain {self.gain_db:g} dB but {what} were taken at "
                f"{_fmt_gain(gain_db)}; a calibration holds at one gain only: repeat the generator sweeps "
                f"at {_fmt_gain(gain_db)} or survey at {self.gain_db:g} dB"
            )

    def to_dbm(self, dbfs, freq_hz, gain_db: float | None):
        """Level in dBFS (power or density) measured at ``gain_db`` to dBm (or dBm/Hz) at the receiver input."""
        self.check_gain(gain_db)
        return np.asarray(dbfs, dtype=np.float64) + np.asarray(self.offset_db_at(freq_hz))


def noise_above_kt0_db(density_dbm_hz):
    """Noise density above the thermal ``k T0`` (dB): ``density - (-173.975 dBm/Hz)``."""
    return np.asarray(density_dbm_hz, dtype=np.float64) - KT0_DBM_HZ


# ---------------------------------------------------------------------------------------
# Reading the levels file
# ---------------------------------------------------------------------------------------


def read_levels_csv(path: str | Path) -> list[tuple[float, float]]:
    """Generator levels per frequency from a CSV with header ``freq_mhz,level_dbm``.

    Returns ``[(freq_hz, level_dbm), ...]`` ascending; :class:`BadParameterError` names the line
    of any bad value, a repeated frequency or a missing column.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise BadParameterError(f"cannot read the levels file {p}: {exc.strerror or exc}") from exc
    reader = csv.DictReader(line for line in text.splitlines() if line.strip() and not line.lstrip().startswith("#"))
    fields = [f.strip() for f in (reader.fieldnames or [])]
    if "freq_mhz" not in fields or "level_dbm" not in fields:
        raise BadParameterError(
            f"levels file {p} needs a header line 'freq_mhz,level_dbm' (found {','.join(fields) or 'nothing'})"
        )
    out: dict[float, float] = {}
    for number, row in enumerate(reader, start=2):
        row = {k.strip(): (v or "").strip() for k, v in row.items() if k is not None}
        try:
            f_mhz, level = float(row["freq_mhz"]), float(row["level_dbm"])
        except ValueError:
            raise BadParameterError(
                f"levels file {p} line {number}: expected two numbers (MHz, dBm), got "
                f"{row['freq_mhz']!r}, {row['level_dbm']!r}"
            ) from None
        if not (math.isfinite(f_mhz) and math.isfinite(level)) or f_mhz <= 0:
            raise BadParameterError(f"levels file {p} line {number}: frequency must be positive and both finite")
        f_hz = f_mhz * 1e6
        if f_hz in out:
            raise BadParameterError(f"levels file {p} line {number}: {f_mhz:g} MHz is listed twice")
        out[f_hz] = level
    if not out:
        raise BadParameterError(f"levels file {p} lists no frequencies")
    return sorted(out.items())


# ---------------------------------------------------------------------------------------
# Deriving a calibration from generator sweeps
# ---------------------------------------------------------------------------------------


def _tone_points(freqs_hz: np.ndarray, tone_db: np.ndarray, cn_db: np.ndarray, received: np.ndarray,
                 wanted: Sequence[tuple[float, float]] | None, level_dbm: float | None,
                 raster_hz: float) -> list[CalibrationPoint]:
    """Calibration points from the per-sweep tone levels (``tone_db`` is ``(n_sweeps, n_freqs)``)."""
    picks: list[tuple[int, float]] = []  # (channel column, generator level)
    if wanted is not None:
        for f_hz, level in wanted:
            col = int(np.argmin(np.abs(freqs_hz - f_hz)))
            if abs(freqs_hz[col] - f_hz) > raster_hz / 2.0 + 1.0:
                raise NoDataError(
                    f"no channel was measured near {f_hz / 1e6:g} MHz in the generator sweeps (nearest "
                    f"{freqs_hz[col] / 1e6:g} MHz); list frequencies inside the band swept"
                )
            picks.append((col, level))
    else:
        strongest = np.where(received, tone_db, -np.inf)
        cols = sorted({int(np.argmax(row)) for row in strongest if np.isfinite(row).any() and row.max() > -np.inf})
        picks = [(c, float(level_dbm)) for c in cols]
    points = []
    for col, level in picks:
        column = np.where(received[:, col], tone_db[:, col], np.nan)
        if not np.isfinite(column).any():
            raise NoDataError(
                f"no generator tone was detected at {freqs_hz[col] / 1e6:g} MHz in any generator sweep; "
                "check the generator frequency, level and connection"
            )
        best = np.nanmax(column)
        rows = np.isfinite(column) & (column >= best - _REPEAT_WINDOW_DB)
        offsets = level - column[rows]
        points.append(CalibrationPoint(
            freq_hz=float(freqs_hz[col]), level_dbm=float(level),
            tone_dbfs=float(np.mean(column[rows])), offset_db=float(np.mean(offsets)),
            spread_db=float(np.std(offsets, ddof=1)) if offsets.size > 1 else 0.0,
            cn_db=float(np.nanmean(cn_db[rows, col])), sweeps=int(rows.sum()),
        ))
    return sorted(points, key=lambda p: p.freq_hz)


def calibrate_from_generator(
    db_path: str | Path,
    configuration: str,
    *,
    level_dbm: float | None = None,
    levels: Sequence[tuple[float, float]] | None = None,
    since_utc: str | None = None,
    until_utc: str | None = None,
) -> Calibration:
    """Derive a :class:`Calibration` from the ``generator`` sweeps of ``configuration``.

    Parameters
    ----------
    level_dbm : float, optional
        One generator level for every tone. Each sweep then holds one tone (the generator is
        stepped in frequency between sweeps): its strongest detected channel.
    levels : sequence of (freq_hz, level_dbm), optional
        Generator levels per frequency (a stepped generator of uneven output, or a comb): one
        point per listed frequency, at the nearest measured channel.

    Sweeps holding the same tone within 3 dB of the strongest are averaged (in dB), and their
    spread kept. Raises :class:`NoDataError` (no generator sweeps or no tone),
    :class:`MismatchError` (several receiver gains, or automatic gain) and
    :class:`BadParameterError` (neither or both level arguments; a level high enough to clip).
    """
    if (level_dbm is None) == (levels is None):
        raise BadParameterError("give the generator level: one constant level in dBm, or a levels file (not both)")
    conn = open_for_reading(db_path)
    try:
        sweeps = list_sweeps(conn, configuration=configuration, input="generator",
                             since_utc=since_utc, until_utc=until_utc)
        if not sweeps:
            present = sorted({s.configuration for s in list_sweeps(conn, input="generator")})
            raise NoDataError(
                f"no complete generator sweeps of configuration '{configuration}' in {db_path}; "
                + (f"generator sweeps exist for: {', '.join(present)}" if present else
                   "record some with the generator on the receiver input (scan --input generator)")
            )
        ids = [s.id for s in sweeps]
        matrix = read_channel_matrix(conn, ids)
        hops = read_hops(conn, ids)
    finally:
        conn.close()
    gains = {s.gain_db for s in sweeps}
    if None in gains or len(gains) > 1:
        raise MismatchError(
            f"the generator sweeps of '{configuration}' were taken at receiver gain "
            f"{', '.join(sorted(map(_fmt_gain, gains)))}; a calibration needs one fixed gain: "
            "repeat them with one manual gain (scan --gain-db)"
        )
    clipped = [h for h in hops if h.clip_fraction is not None and h.clip_fraction > MAX_CLIP_FRACTION]
    if clipped:
        worst = max(clipped, key=lambda h: h.clip_fraction)
        raise BadParameterError(
            f"{worst.clip_fraction:.2%} of the samples hit the ADC rails in the hop at "
            f"{worst.center_hz / 1e6:.3f} MHz of generator sweep {worst.sweep_id}; the generator level "
            "is too high for a linear reading: lower it by 10 dB and repeat"
        )
    p = np.power(10.0, matrix.power_dbfs.astype(np.float64) / 10.0)
    n = np.power(10.0, matrix.noise_dbfs.astype(np.float64) / 10.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        tone_db = np.asarray(ratio_to_db(p - n))
        cn_db = np.asarray(ratio_to_db((p - n) / n))
    freqs = matrix.freqs_hz.astype(np.float64)
    raster = float(np.min(np.diff(freqs))) if freqs.size > 1 else float(sweeps[0].channel_bw_hz)
    received = matrix.received & np.isfinite(tone_db)
    points = _tone_points(freqs, tone_db, cn_db, received, levels, level_dbm, raster)
    if not points:
        raise NoDataError(
            f"no generator tone was detected in the generator sweeps of '{configuration}'; check the "
            "generator frequency (inside the band swept), level and connection"
        )
    source = (f"constant generator level {level_dbm:g} dBm" if level_dbm is not None
              else f"generator levels per frequency ({len(levels or ())} listed)")
    return Calibration(
        gain_db=float(next(iter(gains))), configuration=configuration, points=tuple(points),
        sweep_ids=tuple(int(i) for i in ids), channel_bw_hz=float(sweeps[0].channel_bw_hz),
        sample_rate_hz=float(sweeps[0].sample_rate_hz),
        created_utc=datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"), level_source=source,
    )


# ---------------------------------------------------------------------------------------
# Calibration file
# ---------------------------------------------------------------------------------------


def calibration_to_dict(cal: Calibration) -> dict:
    """JSON-ready form of a calibration (the file's content)."""
    body = asdict(cal)
    body["points"] = [asdict(p) for p in cal.points]
    return {"format": FILE_FORMAT, "version": FILE_VERSION,
            "conversion": "dBm at the receiver input = dBFS + offset_db (linear in frequency between points)",
            **body}


def save_calibration(cal: Calibration, path: str | Path) -> Path:
    """Write the calibration as JSON to ``path`` (replaced atomically); returns the path."""
    p = Path(path)
    tmp = p.with_name(p.name + ".tmp")
    try:
        tmp.write_text(json.dumps(calibration_to_dict(cal), indent=2) + "\n", encoding="utf-8")
        tmp.replace(p)
    except OSError as exc:
        raise BadParameterError(f"cannot write the calibration file {p}: {exc.strerror or exc}") from exc
    return p


def load_calibration(path: str | Path) -> Calibration:
    """Read a calibration file written by :func:`save_calibration` (BadParameterError if it is not one)."""
    p = Path(path)
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except OSError as exc:
        raise BadParameterError(f"cannot read the calibration file {p}: {exc.strerror or exc}") from exc
    except ValueError as exc:
        raise BadParameterError(f"{p} is not a calibration file (not JSON: {exc})") from exc
    if not isinstance(data, Mapping) or data.get("format") != FILE_FORMAT:
        raise BadParameterError(f"{p} is not a bandcensus calibration file; make one with 'bandcensus calibrate'")
    if data.get("version") != FILE_VERSION:
        raise BadParameterError(f"{p} is calibration file version {data.get('version')}; this bandcensus reads "
                                f"version {FILE_VERSION}: make it again with 'bandcensus calibrate'")
    try:
        points = tuple(CalibrationPoint(**{k: float(v) if k != "sweeps" else int(v) for k, v in pt.items()})
                       for pt in data["points"])
        cal = Calibration(
            gain_db=float(data["gain_db"]), configuration=str(data["configuration"]),
            points=tuple(sorted(points, key=lambda q: q.freq_hz)),
            sweep_ids=tuple(int(i) for i in data["sweep_ids"]), channel_bw_hz=float(data["channel_bw_hz"]),
            sample_rate_hz=float(data["sample_rate_hz"]), created_utc=str(data["created_utc"]),
            level_source=str(data["level_source"]),
        )
    except (KeyError, TypeError, ValueError) as exc:
        raise BadParameterError(f"calibration file {p} is damaged ({exc!r}); make it again with 'bandcensus calibrate'") from exc
    if not cal.points:
        raise BadParameterError(f"calibration file {p} holds no points; make it again with 'bandcensus calibrate'")
    return cal


# ---------------------------------------------------------------------------------------
# Adding absolute columns to table rows
# ---------------------------------------------------------------------------------------


def add_absolute_levels(rows: Iterable[Mapping], cal: Calibration, gain_db: float | None,
                        freq_key: str = "freq_hz") -> list[dict]:
    """Copies of ``rows`` with absolute levels beside every dBFS value.

    For each key ending ``_dbfs`` adds ``_dbm`` and ``_dbuv`` (50 ohm); for each key ending
    ``_dbfs_hz`` adds ``_dbm_hz`` and ``_above_kt0_db``; plus ``calibrated`` (False where the
    frequency lies outside the calibration points and the end value was held). ``None`` stays
    ``None``. Raises :class:`MismatchError` when ``gain_db`` is not the calibration's gain.
    """
    cal.check_gain(gain_db)
    out = []
    for row in rows:
        new = dict(row)
        f = float(row[freq_key])
        offset = float(cal.offset_db_at(f))
        for key, value in row.items():
            if not isinstance(key, str):
                continue
            if key.endswith("_dbfs_hz"):
                stem = key[: -len("_dbfs_hz")]
                dbm_hz = None if value is None else float(value) + offset
                new[f"{stem}_dbm_hz"] = dbm_hz
                new[f"{stem}_above_kt0_db"] = None if dbm_hz is None else float(noise_above_kt0_db(dbm_hz))
            elif key.endswith("_dbfs"):
                stem = key[: -len("_dbfs")]
                dbm = None if value is None else float(value) + offset
                new[f"{stem}_dbm"] = dbm
                new[f"{stem}_dbuv"] = None if dbm is None else float(dbm_to_dbuv(dbm))
        new["calibrated"] = bool(cal.covers(f))
        out.append(new)
    return out
