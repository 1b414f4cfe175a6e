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
