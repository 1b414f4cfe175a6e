"""Selection terms shared by every analysis: time bounds (ISO 8601 UTC) and input labels."""

from __future__ import annotations

import warnings
from datetime import datetime, timezone

import numpy as np

from analysis.errors import BadParameterError
from survey.records import INPUT_KINDS

_STORED_FORMAT = "%Y-%m-%dT%H:%M:%S.%fZ"


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


def check_input(input: str) -> str:
    """Validate an input label against :data:`survey.records.INPUT_KINDS`."""
    if input not in INPUT_KINDS:
        raise BadParameterError(f"input {input!r} is not one of {', '.join(INPUT_KINDS)}")
    return input


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
