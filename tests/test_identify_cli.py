"""``bandcensus identify`` end to end, and the ``freq_mhz,name`` names file."""

from __future__ import annotations

import json

import numpy as np
import pytest
import sigmf

from bandcensus.cli import main
from rds_fixtures import FS, station_iq
from survey.errors import NamesFileError
from survey.station_names import name_for, read_station_names
from test_recording import encode, write_foreign


def _recording(tmp_path):
    """Two cu8 captures of 0.5 s: an RDS station at 96.3 MHz, a station without RDS at 99.3 MHz."""
    a = 0.5 * station_iq(1, 30.0)                       # carrier 300 kHz above the centre
    b = 0.5 * station_iq(2, 30.0, programme=None)
    caps = [{sigmf.SAMPLE_START_KEY: 0, sigmf.FREQUENCY_KEY: 96.0e6},
            {sigmf.SAMPLE_START_KEY: a.size, sigmf.FREQUENCY_KEY: 99.0e6}]
    raw = np.concatenate([encode(a, "cu8"), encode(b, "cu8")])
    return write_foreign(tmp_path, "two_stations", "cu8", caps, raw, sample_rate_hz=FS)


def test_identify_names_the_rds_station_and_fills_in_from_the_names_file(tmp_path, capsys):
    meta = _recording(tmp_path)
    names = tmp_path / "names.csv"
    names.write_text("freq_mhz,name\n# user's own list\n99.3,Silent Mast\n96.3,Overridden By RDS\n")
    code = main(["identify", str(meta), "--freq-mhz", "96.3", "--freq-mhz", "99.3", "--freq-mhz", "105.0",
                 "--names", str(names), "--json"])
    assert code == 0
    rows = json.loads(capsys.readouterr().out)["stations"]
    rds, silent, absent = rows
    assert (rds["rds_pi"], rds["rds_ps"], rds["rds_pty"]) == ("E3D2", "HILLTOP ", 10)
    assert rds["rds_block_error_rate"] == 0.0 and rds["rds_blocks"] >= 21 and rds["name"] == "HILLTOP"
    assert silent["rds_pi"] is None and silent["rds_ps"] is None and silent["rds_block_error_rate"] is None
    assert silent["name"] == "Silent Mast"
    assert absent["captures"] == 0 and absent["rds_pi"] is None and absent["name"] is None


def test_identify_table_and_bad_names_file(tmp_path, capsys):
    meta = _recording(tmp_path)
    assert main(["identify", str(meta), "--freq-mhz", "96.3"]) == 0
    out = capsys.readouterr().out
    assert "E3D2" in out and "HILLTOP" in out
    bad = tmp_path / "bad.csv"
    bad.write_text("freq_mhz,name\nninety,Somewhere\n")
    assert main(["identify", str(meta), "--freq-mhz", "96.3", "--names", str(bad)]) == 1
    err = capsys.readouterr().err
    assert err.startswith("Error: ") and "line 2" in err and "MHz" in err


def test_names_file_rules(tmp_path):
    p = tmp_path / "n.csv"
    p.write_text('89.6,Ridge Radio One\n\n102.4,"Valley Classic, relay"\n')
    names = read_station_names(p)
    assert names == {89_600_000: "Ridge Radio One", 102_400_000: "Valley Classic, relay"}
    assert name_for(names, 89.62e6) == "Ridge Radio One"
    assert name_for(names, 89.7e6) is None
    p.write_text("89.6,A\n89.6,B\n")
    with pytest.raises(NamesFileError, match="named twice"):
        read_station_names(p)
    p.write_text("89.6\n")
    with pytest.raises(NamesFileError, match="two fields"):
        read_station_names(p)
    with pytest.raises(NamesFileError, match="cannot read"):
        read_station_names(tmp_path / "missing.csv")
