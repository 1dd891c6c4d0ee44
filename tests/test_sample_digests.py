"""Samples before and after the redesign: SHA-256 of `.npy` drives against the table written by 0.1.0.

The table (tests/data/sample_digests_0_1.json) was written by vibsynth 0.1.0 (commit 3bd36d5)
with `vibsynth generate PROFILE ARGS -o NAME.npy` for each case. The redesign moved every module;
the samples must not have moved with them. A row may change only when a named defect fix changes
its samples; such rows are listed in CHANGED_BY_FIX with the reason, and the test then asserts that
they do differ (so the list cannot go stale).
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
from pathlib import Path

import pytest

from vibsynth.cli.main import main

TABLE = json.loads((Path(__file__).parent / "data" / "sample_digests_0_1.json").read_text())["cases"]

#: case -> why its samples changed (a named defect fix). Empty: every 0.1.0 sample is reproduced.
CHANGED_BY_FIX: dict[str, str] = {}


def _generate(args, output: Path) -> int:
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        return main(["generate", *args, "-o", str(output), "--quiet"])


@pytest.mark.parametrize("case", sorted(TABLE))
def test_samples_match_version_0_1(case, tmp_path):
    row = TABLE[case]
    output = tmp_path / f"{case}.npy"
    assert _generate(row["args"], output) == 0
    digest = hashlib.sha256(output.read_bytes()).hexdigest()
    if case in CHANGED_BY_FIX:
        assert digest != row["sha256"], f"{case} is listed as changed ({CHANGED_BY_FIX[case]}) but matches 0.1.0"
    else:
        assert digest == row["sha256"], f"{case}: samples differ from vibsynth 0.1.0"
