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

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from analysis.selection import Survey, as_survey
from analysis.terms import median_iqr  # noqa: F401  (re-exported: the column statistics live in terms)
from analysis.terms import check_input, normalise_utc, utc_to_epoch_s
from survey.store import ChannelMatrix

#: Name of the spread measure reported beside every median.
SPREAD_NAME = "IQR (75th minus 25th percentile over sweeps)"


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


def cn_db_from(power_dbfs: np.ndarray, noise_dbfs: np.ndarray, received: np.ndarray) -> np.ndarray:
    """Per-sweep C/N ``10 log10((P - N)/N)`` in dB (float32), NaN where not received or P <= N.

    Computed from the level difference, ``10 log10(10**((P - N)/10) - 1)``, in one float32 pass.
    """
    ten = np.float32(10.0)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        excess = np.power(ten, (np.asarray(power_dbfs, np.float32) - np.asarray(noise_dbfs, np.float32)) / ten)
        cn = ten * np.log10(excess - np.float32(1.0))
    return np.where(received & np.isfinite(cn), cn, np.float32(np.nan))


def masked_cn_db(matrix: ChannelMatrix) -> np.ndarray:
    """Per-sweep C/N in dB, NaN where the channel was not received (or not measured)."""
    return cn_db_from(matrix.power_dbfs, matrix.noise_dbfs, matrix.received)


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
    source: Survey | str | Path,
    configuration: str | None,
    *,
    input: str = "antenna",
    since: str | None = None,
    until: str | None = None,
) -> ConfigurationStats:
    """Per-channel statistics of the complete sweeps of ``configuration`` (None: every label).

    Raises :class:`NoDataError` (naming the labels present) when no sweep matches.
    """
    survey, opened = as_survey(source)
    try:
        matrix = survey.channel_matrix(survey.sweeps(configuration, input, since, until))
    finally:
        if opened:
            survey.close()
    return statistics_from_matrix(matrix, configuration, input)


def _opt(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def channel_table(
    source: Survey | str | Path,
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
    stats = configuration_statistics(source, configuration, input=input, since=since, until=until)
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


__all__ = ["ConfigurationStats", "SPREAD_NAME", "channel_table", "check_input", "cn_db_from", "configuration_statistics",
           "masked_cn_db", "median_iqr", "normalise_utc", "statistics_from_arrays", "statistics_from_matrix",
           "utc_to_epoch_s"]
