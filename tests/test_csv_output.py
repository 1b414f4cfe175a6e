"""CSV as the user sees it: rounded by unit, a header line, spreadsheet-safe text, numbers intact.

Formula-prefix characters and the single-quote mitigation: OWASP "CSV Injection" page.
"""

import csv
import io
import math

import numpy as np
import pytest

from bandcensus.commands._csv import csv_text, decimals_for, format_cell, safe_text


def test_header_then_rows_rounded_by_unit():
    rows = [{
        "freq_hz": 97_199_999.6, "power_dbfs": -44.544464111328125, "cn_db": np.float32(17.123456),
        "temp_k": 1234.5678, "received_fraction": 2 / 3, "noise_density_dbfs_hz": -101.23456,
        "freq_mhz": 97.2, "label": "bare", "sweeps": 12,
    }]
    fields = ["freq_hz", "freq_mhz", "power_dbfs", "noise_density_dbfs_hz", "cn_db", "temp_k",
              "received_fraction", "label", "sweeps"]
    text = csv_text(rows, fields)
    lines = text.splitlines()
    assert lines[0] == ",".join(fields)
    assert lines[1] == "97200000,97.2,-44.54,-101.23,17.12,1234.6,0.6667,bare,12"
    assert text.endswith("\n") and "\r" not in text


def test_density_columns_are_decibels_not_hertz():
    assert decimals_for("noise_density_dbfs_hz") == 2
    assert decimals_for("psd_dbm_hz") == 2
    assert decimals_for("center_hz") == 0
    assert decimals_for("label") is None


@pytest.mark.parametrize("text", ["=1+2", "+SUM(A1)", "-2+3", "@cmd", "\tx", "\rx"])
def test_text_that_a_spreadsheet_would_evaluate_is_quoted(text):
    cell = format_cell("configuration", text)
    assert cell == "'" + text
    assert safe_text("preamp-a") == "preamp-a"


def test_negative_numbers_are_never_prefixed():
    assert format_cell("delta_cn_db", -1.234) == "-1.23"
    assert format_cell("sweep_id", -3) == "-3"
    assert format_cell("delta_cn_db", -0.001) == "0.00"  # no "-0.00"
    rows = list(csv.reader(io.StringIO(csv_text([{"x_db": -5.0, "name": "-5"}], ["x_db", "name"]))))
    assert rows[1] == ["-5.00", "'-5"]


def test_missing_and_non_finite_values_are_empty_cells():
    text = csv_text([{"cn_db": None, "power_dbfs": math.nan, "temp_k": math.inf, "ok": True}],
                    ["cn_db", "power_dbfs", "temp_k", "ok", "absent"])
    assert text.splitlines()[1] == ",,,true,"


def test_unknown_float_columns_keep_six_significant_digits():
    assert format_cell("weight", 0.1234567891) == "0.123457"
    assert format_cell("freq_mhz", 88.0) == "88.0"
    assert format_cell("freq_mhz", 88.1234567) == "88.123457"


def test_text_with_commas_and_quotes_round_trips():
    rows = [{"configuration": 'preamp "a", tuned'}]
    back = list(csv.DictReader(io.StringIO(csv_text(rows, ["configuration"]))))
    assert back[0]["configuration"] == 'preamp "a", tuned'
