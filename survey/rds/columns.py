"""RDS for the station census: which emissions of a hop to decode, and the stored/JSON forms.

A hop's FM emissions are decoded together (one FFT of the hop shared,
:func:`survey.rds.identity.decode_stations`) when their C/N reaches :data:`RDS_MIN_CN_DB` and
their channel lies wholly inside the hop. Below 10 dB C/N the simulator never synchronised in
0.5 s (0 of 20 at 8 dB, 6 of 20 at 10 dB), so decoding weaker emissions only costs time.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from survey.rds.identity import RdsIdentity, RdsResult, decode_stations

RDS_MIN_CN_DB = 10.0
#: Shortest hop worth decoding, s: two 26-bit blocks at 1187.5 bit/s (44 ms), the least that can
#: confirm a PI, plus the demodulator's edge of 1.5 bits at each end (2.5 ms). Shorter hops
#: (e.g. 5 ms dwells) are not decoded at all.
RDS_MIN_DWELL_S = 0.047
#: Half-width of the channel the decoder takes (125 kHz) plus a margin to the hop edge, Hz.
EDGE_MARGIN_HZ = 150_000.0

#: Columns of the ``stations`` table (one row per station per sweep) and their SQL types.
STATION_COLUMNS: tuple[tuple[str, str], ...] = (
    ("rds_pi", "INTEGER"),              # confirmed PI, NULL when none
    ("rds_ps", "TEXT"),                 # PS as known in this sweep, '_' per missing character; NULL
    ("rds_pty", "INTEGER"),             # programme type 0..31, NULL
    ("rds_blocks", "INTEGER NOT NULL DEFAULT 0"),        # block slots read (0: no synchronisation)
    ("rds_block_errors", "INTEGER NOT NULL DEFAULT 0"),  # of those, failed checkword/offset
)


def decode_hop_emissions(samples: np.ndarray, sample_rate_hz: float, center_hz: float,
                         carriers_hz: Sequence[float], cn_db: Sequence[float | None]) -> list[RdsResult | None]:
    """RDS of each emission of a hop (None where not attempted: weak, too near the hop edge, or
    the hop shorter than :data:`RDS_MIN_DWELL_S`).

    ``samples`` is the hop's complex IQ at full scale, ``carriers_hz`` the emissions' absolute
    carrier frequencies (Hz) and ``cn_db`` their C/N (dB, None for unknown).
    """
    out: list[RdsResult | None] = [None] * len(carriers_hz)
    if np.asarray(samples).size < RDS_MIN_DWELL_S * sample_rate_hz:
        return out
    limit = sample_rate_hz / 2.0 - EDGE_MARGIN_HZ
    picks = [k for k, (f, c) in enumerate(zip(carriers_hz, cn_db))
             if c is not None and c >= RDS_MIN_CN_DB and abs(float(f) - center_hz) <= limit]
    if picks:
        results = decode_stations(samples, sample_rate_hz, [float(carriers_hz[k]) - center_hz for k in picks])
        for k, r in zip(picks, results):
            out[k] = r
    return out


def stored_columns(result: RdsResult | None) -> dict:
    """The :data:`STATION_COLUMNS` values of one result (None: not attempted, all empty)."""
    if result is None:
        return {"rds_pi": None, "rds_ps": None, "rds_pty": None, "rds_blocks": 0, "rds_block_errors": 0}
    return {"rds_pi": result.pi, "rds_ps": result.ps_partial, "rds_pty": result.pty,
            "rds_blocks": result.blocks_received, "rds_block_errors": result.blocks_errored}


def json_fields(ident: RdsIdentity | RdsResult | None) -> dict:
    """``"rds_pi"`` (4 hex digits or None), ``"rds_ps"``, ``"rds_pty"``, ``"rds_block_error_rate"``.

    ``rds_ps`` is the whole name when known, else what is known with ``_`` for missing
    characters, else None.
    """
    if ident is None:
        return {"rds_pi": None, "rds_ps": None, "rds_pty": None, "rds_block_error_rate": None}
    return {"rds_pi": ident.pi_hex, "rds_ps": ident.ps if ident.ps is not None else ident.ps_partial,
            "rds_pty": ident.pty, "rds_block_error_rate": ident.block_error_rate}
