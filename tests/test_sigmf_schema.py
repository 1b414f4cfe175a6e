"""The cached SigMF validator accepts and refuses what the SigMF reference library does."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import jsonschema
import pytest
import sigmf.validate

from survey.sources.sigmf_schema import validate_metadata

DEMO = Path(__file__).resolve().parents[1] / "recordings_demo" / "sigmf"


def _demo_meta() -> dict:
    path = sorted(DEMO.glob("*.sigmf-meta"))[0]
    return json.loads(path.read_text())


def _bad_variants(meta: dict) -> list[dict]:
    wrong_type = copy.deepcopy(meta)
    wrong_type["global"]["core:sample_rate"] = "fast"
    no_datatype = copy.deepcopy(meta)
    del no_datatype["global"]["core:datatype"]
    bad_capture = copy.deepcopy(meta)
    bad_capture["captures"][0]["core:sample_start"] = -5
    out_of_order = copy.deepcopy(meta)
    out_of_order["captures"] = [dict(out_of_order["captures"][0], **{"core:sample_start": 100}),
                                dict(out_of_order["captures"][0], **{"core:sample_start": 10})]
    return [wrong_type, no_datatype, bad_capture, out_of_order]


def test_demo_metadata_is_valid_for_both():
    meta = _demo_meta()
    sigmf.validate.validate(meta)  # reference: sigmf-python's own validator
    validate_metadata(meta)


@pytest.mark.parametrize("case", range(4))
def test_broken_metadata_is_refused_by_both_with_the_same_message(case):
    meta = _bad_variants(_demo_meta())[case]
    with pytest.raises(jsonschema.exceptions.ValidationError) as reference:
        sigmf.validate.validate(meta)
    with pytest.raises(jsonschema.exceptions.ValidationError) as ours:
        validate_metadata(meta)
    assert ours.value.message == reference.value.message
    assert list(ours.value.absolute_path) == list(reference.value.absolute_path)
