"""The JSON Schema files (draft 2020-12) shipped with the package: ``sidecar`` and ``report``.

References
----------
JSON Schema draft 2020-12 (json-schema.org); Python ``importlib.resources``.
"""

from __future__ import annotations

import json
from importlib import resources

#: Schema names and their files in ``vibsynth/schemas/``.
SCHEMA_FILES = {"sidecar": "sidecar.schema.json", "report": "report.schema.json"}


def load_schema(name: str) -> dict:
    """The JSON Schema of ``sidecar`` (FILE.json beside a drive) or ``report`` (a run's report.json).

    Examples
    --------
    >>> load_schema("sidecar")["properties"]["schema_version"]
    {'const': 2}

    References
    ----------
    JSON Schema draft 2020-12.
    """
    if name not in SCHEMA_FILES:
        raise ValueError(f"no schema {name!r}; use one of {', '.join(SCHEMA_FILES)}")
    text = resources.files("vibsynth").joinpath("schemas", SCHEMA_FILES[name]).read_text(encoding="utf-8")
    return json.loads(text)


__all__ = ["SCHEMA_FILES", "load_schema"]
