"""SigMF metadata validation with one schema validator built once per process.

The check is the one of the SigMF reference library (``sigmf.validate.validate``): the metadata
must follow the SigMF metadata JSON schema shipped with ``sigmf`` (JSON Schema, checked by the
``jsonschema`` reference implementation) and the ``core:sample_start`` of captures and of
annotations must not decrease. The library's own call builds the validator, and checks the
schema against its metaschema, again for every file; here both happen once and every recording
reuses the validator. Errors are the same ``jsonschema`` ``ValidationError`` (the best match,
as ``jsonschema.validate`` raises). The library's warning about undeclared extension
namespaces is not repeated (it is a warning there, not a failure).
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any

import jsonschema
from sigmf import schema as sigmf_schema


@lru_cache(maxsize=1)
def _validator() -> Any:
    """The jsonschema validator of the SigMF metadata schema; the schema itself checked once."""
    meta_schema = sigmf_schema.get_schema()
    cls = jsonschema.validators.validator_for(meta_schema)
    cls.check_schema(meta_schema)
    return cls(meta_schema)


def validate_metadata(metadata: dict) -> None:
    """Check a SigMF metadata object (``global``, ``captures``, ``annotations``) like sigmf does.

    Raises
    ------
    jsonschema.exceptions.ValidationError
        The metadata does not follow the SigMF schema, or the captures' or annotations'
        ``core:sample_start`` decrease.
    """
    error = jsonschema.exceptions.best_match(_validator().iter_errors(metadata))
    if error is not None:
        raise error
    for key in ("captures", "annotations"):
        previous = -1
        for item in metadata.get(key, []):
            start = item.get("core:sample_start", 0) if isinstance(item, dict) else 0
            if start < previous:
                raise jsonschema.exceptions.ValidationError(f"{key} has incorrect sample start ordering.")
            previous = start
