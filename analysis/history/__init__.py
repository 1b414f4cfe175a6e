"""One station's C/N over time, per configuration (``series``), and its plot (``plots``)."""

from analysis.history.series import StationHistory, StationSeries, series_rows, station_history, summarise_series

__all__ = ["StationHistory", "StationSeries", "series_rows", "station_history", "summarise_series"]
