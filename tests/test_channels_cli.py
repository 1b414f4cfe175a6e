"""``bandcensus channels`` without --config: one block per configuration, never pooled."""

from __future__ import annotations

import json

import numpy as np

from analysis.channel_stats import channel_table
from bandcensus.cli import main
from compare_truth import FREQS_HZ, make_truth, write_db


def test_one_block_per_configuration(tmp_path, capsys):
    db = tmp_path / "two.db"
    write_db(db, make_truth(5, n_per_side=6))
    assert main(["channels", "--db", str(db), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [b["configuration"] for b in doc["configurations"]] == ["bare", "preamp-a"]
    for block in doc["configurations"]:
        assert len(block["channels"]) == FREQS_HZ.size
        assert block["channels"] == json.loads(json.dumps(channel_table(db, block["configuration"])))
    # the preamp lifts the floor by 9 dB: a pooled median would sit between the two
    n_bare = np.array([r["noise_dbfs"] for r in doc["configurations"][0]["channels"]])
    n_pre = np.array([r["noise_dbfs"] for r in doc["configurations"][1]["channels"]])
    assert np.median(n_pre - n_bare) > 8.0
    assert main(["channels", "--db", str(db), "--csv"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0].endswith(",configuration") and len(lines) == 1 + 2 * FREQS_HZ.size
    header = lines[0].split(",")
    for line in lines[1:]:   # levels to 0.01 dB, frequencies to 1 Hz (bandcensus/commands/_csv.py)
        for name, cell in zip(header, line.split(",")):
            if cell and name.endswith(("_db", "_dbfs")):
                assert len(cell.split(".")[1]) == 2, (name, cell)
            if cell and name.endswith("_hz"):
                assert cell.isdigit(), (name, cell)


def test_csv_rounds_by_unit_and_makes_labels_safe(tmp_path, capsys):
    """CSV cells carry the precision of their unit (0.01 dB, 1 Hz, bandcensus/commands/_csv.py) and a
    configuration label that looks like a formula is written as text (OWASP "CSV Injection")."""
    import csv
    import io

    from bandcensus.commands._csv import csv_text

    text = csv_text([{"freq_hz": 88_100_000.4, "power_dbfs": -44.544464111328125, "noise_dbfs": -60.0,
                      "cn_db": 15.455535888671875, "received": True, "received_fraction": 2 / 3, "sweeps": 3,
                      "configuration": "=preamp+1"}],
                    ["freq_hz", "power_dbfs", "noise_dbfs", "cn_db", "received", "received_fraction", "sweeps",
                     "configuration"])
    (row,) = csv.DictReader(io.StringIO(text))
    assert row == {"freq_hz": "88100000", "power_dbfs": "-44.54", "noise_dbfs": "-60.00", "cn_db": "15.46",
                   "received": "true", "received_fraction": "0.6667", "sweeps": "3", "configuration": "'=preamp+1"}
