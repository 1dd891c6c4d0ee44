"""The Examples sections of the derive, stationarity and burst-model modules run as written."""

from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["vibsynth.analysis.derive", "vibsynth.analysis.stationarity", "vibsynth.analysis.derive_figures",
           "vibsynth.generate.modulation"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(name)
    failures, tried = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert tried > 0 and failures == 0
