"""Per-configuration channel statistics: typical power, noise floor and C/N of every channel.

The survey stores one row per channel per sweep. For a configuration (the user's label for
what is in the chain) and an input (``antenna`` by default) this module reduces the sweeps to
one robust summary per channel:

* the **median** over sweeps of channel power ``P`` (dBFS), noise power ``N`` (dBFS) and
  carrier-to-noise ``C/N = (P - N) / N`` (dB, what the tool calls SNR);
* their spread as the **interquartile range** (IQR, 75th minus 25th percentile, in dB);
* the fraction of sweeps in which the channel was received (the stored ``received`` flag,
  which the sweep engine sets when ``P`` exceeds ``N`` by the detection margin);
* the number of sweeps.

C/N of a channel that was not received is undefined, not a large negative number. The C/N
median treats such sweeps as *left-censored*: they rank below every received sweep, so a
channel that fades out now and then keeps an unbiased median instead of the optimistic
median of only its good sweeps. The median (and each quartile) is therefore defined only
when at least half (a quarter, three quarters) of the sweeps received the channel; otherwise
it is NaN, and :func:`channel_table` reports ``cn_db = None`` (and ``cn_spread_db = None``
when the lower quartile is censored).

Medians and IQRs are order statistics, robust to the occasional burst of interference or a
fading dip (Hampel et al., *Robust Statistics*, 1986, on the median's 50 % breakdown point).
All reductions are vectorised over sweeps (``numpy.percentile`` / ``nanpercentile`` along
axis 0).
"""

from __future__ import annotations

import sqlite3
import warnings
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from analysis.errors import BadParameterError, NoDataError
from survey.units import db_to_ratio, ratio_to_db
from survey.store import ChannelMatrix, SweepRow, list_sweeps, open_for_reading, read_channel_matrix

#: Name of the spread measure reported beside every median.
SPREAD_NAME = "IQR (75th minus 25th percentile over sweeps)"

_STORED_FORMAT = "%Y-%m-%dT%H:%M:%S.%fZ"


@dataclass(frozen=True)
class ConfigurationStats:
    """Per-channel statistics of one configuration and input.

    Arrays have one entry per channel of ``freqs_hz`` (ascending, Hz). Levels in dBFS,
    C/N and spreads in dB; NaN where undefined (no sweep measured or received the channel).
    """

    configuration: str | None
    input: str
    n_sweeps: int
    freqs_hz: np.ndarray
    power_dbfs: np.ndarray
    power_spread_db: np.ndarray
    noise_dbfs: np.ndarray
    noise_spread_db: np.ndarray
    cn_db: np.ndarray
    cn_spread_db: np.ndarray
    received_fraction: np.ndarray
    n_measured: np.ndarray
    spread: str = SPREAD_NAME

    @property
    def received(self) -> np.ndarray:
        """True where the channel was received in at least half of the sweeps."""
        return self.received_fraction >= 0.5


def normalise_utc(text: str | None, option: str = "time") -> str | None:
    """An ISO 8601 time as the database stores it (UTC, ``...%fZ``), for string comparison.

    A time without a zone is taken as UTC. Raises :class:`BadParameterError` for text that is
    not ISO 8601.
    """
    if text is None:
        return None
    raw = text.strip()
    try:
        stamp = datetime.fromisoformat(raw[:-1] + "+00:00" if raw.endswith(("Z", "z")) else raw)
    except ValueError:
        raise BadParameterError(
            f"{option} {text!r} is not an ISO 8601 time; write it like 2026-05-01T18:00 (UTC)"
        ) from None
    if stamp.tzinfo is None:
        stamp = stamp.replace(tzinfo=timezone.utc)
    return stamp.astimezone(timezone.utc).strftime(_STORED_FORMAT)


def utc_to_epoch_s(stamps: tuple[str, ...] | list[str]) -> np.ndarray:
    """Stored UTC times (ISO 8601) to seconds since 1970 as float64 (vectorised parse)."""
    if not stamps:
        return np.zeros(0, np.float64)
    try:
        cleaned = np.asarray([s[:-1] if s.endswith("Z") else s for s in stamps])
        us = cleaned.astype("datetime64[us]").astype(np.int64)
        return us.astype(np.float64) / 1e6
    except ValueError:
        return np.asarray([datetime.fromisoformat(normalise_utc(s)[:-1] + "+00:00").timestamp()
                           for s in stamps], np.float64)


def labels_present(conn: sqlite3.Connection) -> list[str]:
    """Every configuration label with ``(input: n sweeps)``, for error messages."""
    rows = conn.execute(
        "SELECT configuration, input, COUNT(*) FROM sweeps WHERE complete = 1"
        " GROUP BY configuration, input ORDER BY configuration, input"
    ).fetchall()
    return [f"{c} ({i}: {n} sweeps)" for c, i, n in rows]


def select_sweeps(
    conn: sqlite3.Connection,
    configuration: str | None,
    input: str = "antenna",
    since: str | None = None,
    until: str | None = None,
) -> list[SweepRow]:
    """Complete sweeps of one configuration and input in a time range, oldest first.

    Raises :class:`NoDataError` naming the labels present when nothing matches, and
    :class:`BadParameterError` for an input label that does not exist.
    """
    check_input(input)
    rows = list_sweeps(
        conn, configuration=configuration, input=input,
        since_utc=normalise_utc(since, "since"), until_utc=normalise_utc(until, "until"),
    )
    if not rows:
        present = labels_present(conn)
        what = f"configuration '{configuration}'" if configuration is not None else "any configuration"
        span = ""
        if since or until:
            span = f" between {since or 'the start'} and {until or 'the end'}"
        raise NoDataError(
            f"no complete sweeps of {what} with input '{input}'{span}; labels present: "
            + (", ".join(present) if present else "none (the database has no complete sweeps)")
            + "; check the spelling or the time range"
        )
    return rows


def read_matrix(conn: sqlite3.Connection, rows: list[SweepRow]) -> ChannelMatrix:
    """Channel readings of ``rows`` (time order kept), as :func:`survey.store.read_channel_matrix`.

    Fast path for the usual case, every sweep on one frequency axis: the columnar blobs are
    joined and decoded once (``numpy.frombuffer``) instead of sweep by sweep. Anything else
    (mixed axes, a sweep without its columnar copy) goes through ``read_channel_matrix``.
    """
    ids = [int(r.id) for r in rows]
    blobs: dict[int, tuple[bytes, bytes, bytes, bytes]] = {}
    for start in range(0, len(ids), 900):
        chunk = ids[start:start + 900]
        marks = ",".join("?" * len(chunk))
        for sid, fr, pw, nz, rc in conn.execute(
            f"SELECT sweep_id, freqs_hz, power_dbfs, noise_dbfs, received FROM channel_vectors"
            f" WHERE sweep_id IN ({marks})", chunk,
        ):
            blobs[int(sid)] = (fr, pw, nz, rc)
    if not ids or len(blobs) != len(ids) or len({b[0] for b in blobs.values()}) != 1:
        return read_channel_matrix(conn, ids)
    freqs = np.frombuffer(blobs[ids[0]][0], dtype="<i8").astype(np.int64)
    n, m = len(ids), freqs.size
    ordered = [blobs[i] for i in ids]
    power = np.frombuffer(b"".join(b[1] for b in ordered), dtype="<f4").reshape(n, m).astype(np.float32)
    noise = np.frombuffer(b"".join(b[2] for b in ordered), dtype="<f4").reshape(n, m).astype(np.float32)
    received = np.frombuffer(b"".join(b[3] for b in ordered), dtype=np.uint8).reshape(n, m).astype(bool)
    return ChannelMatrix(np.asarray(ids, np.int64), tuple(r.started_utc for r in rows), freqs, power, noise,
                         received)


def cn_db_from(power_dbfs: np.ndarray, noise_dbfs: np.ndarray, received: np.ndarray) -> np.ndarray:
    """Per-sweep C/N ``10 log10((P - N)/N)`` in dB (float32), NaN where not received or P <= N.

    Computed from the level difference, ``10 log10(10**((P - N)/10) - 1)``, in one pass.
    """
    with np.errstate(invalid="ignore", over="ignore"):
        excess = np.asarray(db_to_ratio(np.asarray(power_dbfs, np.float32) - np.asarray(noise_dbfs, np.float32)))
        cn = np.asarray(ratio_to_db(excess - 1.0), np.float32)
    return np.where(received & np.isfinite(cn), cn, np.float32(np.nan))


def masked_cn_db(matrix: ChannelMatrix) -> np.ndarray:
    """Per-sweep C/N in dB, NaN where the channel was not received (or not measured)."""
    return cn_db_from(matrix.power_dbfs, matrix.noise_dbfs, matrix.received)


def median_iqr(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Column median and IQR over axis 0; NaN ignored; -inf (censored low) values are ranked.

    All-NaN columns give NaN without a warning; a median or quartile that falls on a
    censored value is NaN (undefined), never a number. Arrays without NaN take the fast
    path (one partition of the whole array).
    """
    if values.shape[0] == 0:
        nan = np.full(values.shape[1], np.nan)
        return nan, nan.copy()
    fn = np.nanpercentile if np.isnan(values).any() else np.percentile
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns: NaN is the answer
        with np.errstate(invalid="ignore"):
            q25, q50, q75 = fn(values, [25.0, 50.0, 75.0], axis=0)
            iqr = q75 - q25
    q50 = np.where(np.isfinite(q50), q50, np.nan)
    iqr = np.where(np.isfinite(iqr), iqr, np.nan)
    return np.asarray(q50, np.float64), np.asarray(iqr, np.float64)


def statistics_from_arrays(
    freqs_hz: np.ndarray,
    power_dbfs: np.ndarray,
    noise_dbfs: np.ndarray,
    received: np.ndarray,
    cn_db: np.ndarray | None = None,
    configuration: str | None = None,
    input: str = "antenna",
    levels: bool = True,
) -> ConfigurationStats:
    """Reduce ``(n_sweeps, n_freqs)`` readings to per-channel medians and IQRs.

    ``power_dbfs`` / ``noise_dbfs`` are NaN where a sweep did not measure a channel;
    ``cn_db`` (optional, from :func:`cn_db_from`) saves recomputing the per-sweep C/N;
    ``levels=False`` skips the power and noise medians (left NaN) when only C/N is needed.

    Returns
    -------
    ConfigurationStats
        Medians (dBFS / dB), IQRs (dB), received fraction (of the sweeps that measured the
        channel) and counts.
    """
    power = np.asarray(power_dbfs, np.float32)
    noise = np.asarray(noise_dbfs, np.float32)
    measured = np.isfinite(power) & np.isfinite(noise)
    if cn_db is None:
        cn_db = cn_db_from(power, noise, received)
    # Left-censored C/N: a measured sweep that did not receive the channel ranks below every
    # received one (-inf), so the median is not biased upward by dropping faded sweeps.
    cn = np.where(measured & ~received, np.float32(-np.inf), cn_db)
    n_measured = measured.sum(axis=0)
    received_count = (received & measured).sum(axis=0)
    received_fraction = received_count / np.maximum(n_measured, 1)
    if levels:
        p_med, p_iqr = median_iqr(power)
        n_med, n_iqr = median_iqr(noise)
    else:
        p_med = p_iqr = n_med = n_iqr = np.full(power.shape[1], np.nan)
    c_med, c_iqr = median_iqr(cn)
    return ConfigurationStats(
        configuration=configuration,
        input=input,
        n_sweeps=int(power.shape[0]),
        freqs_hz=np.asarray(freqs_hz, np.int64),
        power_dbfs=p_med,
        power_spread_db=p_iqr,
        noise_dbfs=n_med,
        noise_spread_db=n_iqr,
        cn_db=c_med,
        cn_spread_db=c_iqr,
        received_fraction=np.asarray(received_fraction, np.float64),
        n_measured=np.asarray(n_measured, np.int64),
    )


def statistics_from_matrix(
    matrix: ChannelMatrix, configuration: str | None = None, input: str = "antenna"
) -> ConfigurationStats:
    """Per-channel medians and IQRs of a :class:`~survey.store.ChannelMatrix` (see above)."""
    return statistics_from_arrays(matrix.freqs_hz, matrix.power_dbfs, matrix.noise_dbfs, matrix.received,
                                  configuration=configuration, input=input)


def configuration_statistics(
    db_path: str | Path,
    configuration: str | None,
    *,
    input: str = "antenna",
    since: str | None = None,
    until: str | None = None,
) -> ConfigurationStats:
    """Per-channel statistics of the complete sweeps of ``configuration`` (None: every label).

    Raises :class:`NoDataError` (naming the labels present) when no sweep matches.
    """
    conn = open_for_reading(db_path)
    try:
        rows = select_sweeps(conn, configuration, input, since, until)
        matrix = read_matrix(conn, rows)
    finally:
        conn.close()
    return statistics_from_matrix(matrix, configuration, input)


def _opt(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def channel_table(
    db_path: str | Path,
    configuration: str | None = None,
    since: str | None = None,
    until: str | None = None,
    input: str = "antenna",
) -> list[dict]:
    """One dict per channel (ascending frequency) summarising the selected sweeps.

    Keys: ``freq_hz`` (int, Hz), ``power_dbfs`` and ``noise_dbfs`` (medians, dBFS), ``cn_db``
    (left-censored median C/N, dB, see the module notes; None when the channel was received in
    fewer than half of the sweeps), ``received`` (received in at least half), ``received_fraction``,
    ``sweeps`` (number of sweeps that measured the channel), ``cn_spread_db`` (IQR of C/N, dB;
    None where ``cn_db`` is None or the lower quartile is censored). ``configuration=None`` takes
    every configuration of ``input``.
    """
    stats = configuration_statistics(db_path, configuration, input=input, since=since, until=until)
    table = []
    for j, freq in enumerate(stats.freqs_hz.tolist()):
        received = bool(stats.received_fraction[j] >= 0.5)
        table.append(
            {
                "freq_hz": int(freq),
                "power_dbfs": _opt(stats.power_dbfs[j]),
                "noise_dbfs": _opt(stats.noise_dbfs[j]),
                "cn_db": _opt(stats.cn_db[j]) if received else None,
                "received": received,
                "received_fraction": float(stats.received_fraction[j]),
                "sweeps": int(stats.n_measured[j]),
                "cn_spread_db": _opt(stats.cn_spread_db[j]) if received else None,
            }
        )
    return table


def check_input(input: str) -> str:
    """Validate an input label against :data:`survey.records.INPUT_KINDS`."""
    from survey.records import INPUT_KINDS

    if input not in INPUT_KINDS:
        raise BadParameterError(f"input {input!r} is not one of {', '.join(INPUT_KINDS)}")
    return input
