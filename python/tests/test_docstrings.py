"""The examples in the package's docstrings run, from the repository root,
and print what they show (the Spark one runs in test_spark.py's session)."""

from __future__ import annotations

import doctest
import os

import ratepool
from conftest import ROOT


def test_the_docstring_examples_print_what_they_show():
    here = os.getcwd()
    os.chdir(ROOT)
    try:
        results = doctest.testmod(ratepool, extraglobs={"ratepool": ratepool}, verbose=False)
    finally:
        os.chdir(here)
    assert results.attempted >= 10
    assert results.failed == 0
