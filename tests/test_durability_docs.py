"""The Examples sections of vibsynth.durability run as written; the package stays independent of the generator."""

from __future__ import annotations

import doctest
import importlib
import json
import subprocess
import sys

import pytest

MODULES = ["sdof", "filters", "rainflow", "damage", "equivalence", "shaker", "figures", "report"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(f"vibsynth.durability.{name}")
    failures, tried = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert tried > 0 and failures == 0


def test_durability_never_loads_the_generator_and_its_names_resolve():
    code = ("import json, sys, vibsynth.durability as d; [getattr(d, n) for n in d.__all__]; "
            "print(json.dumps(sorted(m for m in sys.modules if m.startswith('vibsynth.'))))")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    loaded = json.loads(result.stdout)
    assert not [m for m in loaded if m.startswith(("vibsynth.generate", "vibsynth.transforms"))], loaded
