"""SQLite store of surveys: the only package of bandcensus that speaks SQL.

``schema`` holds the tables, the schema version and the migrations and opens files (refusing
files that are not ours); ``writer`` holds :class:`SurveyStore`, which writes runs, events and
sweeps (one transaction per sweep); ``read`` holds the typed read helpers the analyses use;
``station_columns`` the columnar copy of the station rows (``station_vectors``) and its reader.
Everything public is importable from ``survey.store`` itself.
"""

from survey.store.schema import (  # noqa: F401
    SCHEMA_VERSION, MIGRATIONS, utc_now, APPLICATION_ID, check_ownership, open_error,
)
from survey.store.writer import (  # noqa: F401
    SurveyStore, upgrade_database,
)
from survey.store.station_columns import (  # noqa: F401
    STATION_VECTOR_FIELDS, StationColumns, read_station_columns, pack_station_vector, station_blobs,
)
from survey.store.read import (  # noqa: F401
    SweepRow, ChannelMatrix, open_for_reading, list_runs, list_sweeps, read_channel_matrix, HopRow, read_hops, read_spectra, read_events, RunRow, read_runs, EventRow, read_event_rows, LabelCount, count_complete_sweeps, HopSpectrum, read_hop_spectra, sweeps_with_spectra, spectra_span_hz, read_channel_hop_centers, read_sweep_matrix, StationRow, read_station_rows, identified_sweep_ids,
)

__all__ = ['SCHEMA_VERSION', 'MIGRATIONS', 'utc_now', 'APPLICATION_ID', 'check_ownership', 'open_error', 'SurveyStore', 'upgrade_database', 'SweepRow', 'ChannelMatrix', 'open_for_reading', 'list_runs', 'list_sweeps', 'read_channel_matrix', 'HopRow', 'read_hops', 'read_spectra', 'read_events', 'RunRow', 'read_runs', 'EventRow', 'read_event_rows', 'LabelCount', 'count_complete_sweeps', 'HopSpectrum', 'read_hop_spectra', 'sweeps_with_spectra', 'spectra_span_hz', 'read_channel_hop_centers', 'read_sweep_matrix', 'StationRow', 'read_station_rows', 'identified_sweep_ids', 'STATION_VECTOR_FIELDS', 'StationColumns', 'read_station_columns', 'pack_station_vector', 'station_blobs']
