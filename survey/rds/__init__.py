"""Radio Data System (IEC 62106): station identity and reception quality from a hop's IQ.

Encoder side (:mod:`survey.rds.code`, :mod:`survey.rds.waveform`) for the simulator and the
tests; receiver side (:mod:`survey.rds.demod`, :mod:`survey.rds.frames`,
:mod:`survey.rds.identity`). The entry points are :func:`decode_station` and :func:`merge_rds`;
:mod:`survey.rds.columns` says which emissions of a hop to decode and gives the stored and JSON
forms; :mod:`survey.rds.from_recording` decodes chosen stations across a recording's captures.
"""

from survey.rds.identity import RdsIdentity, RdsResult, decode_station, decode_stations, merge_rds
from survey.rds.waveform import RdsProgramme

__all__ = ["RdsIdentity", "RdsProgramme", "RdsResult", "decode_station", "decode_stations", "merge_rds"]
