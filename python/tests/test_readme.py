"""The README's Python examples (section "From Python") print what the README
shows: each ```python block is run from the repository root and its printed
output compared line by line with the ```text block after it."""

from __future__ import annotations

import contextlib
import io
import os
import re
import sys

import pytest

from conftest import ROOT


def examples():
    readme = (ROOT / "README.md").read_text()
    section = readme.split("## From Python", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```(\w*)\n(.*?)```", section, flags=re.S)
    pairs = [(code, shown) for (kind, code), (next_kind, shown) in zip(blocks, blocks[1:])
             if kind == "python" and next_kind == "text"]
    assert len(pairs) == 2, "the polars and the Spark example"
    return pairs


@pytest.mark.parametrize("code, shown", examples(), ids=["polars", "spark"])
def test_a_readme_example_prints_what_the_readme_shows(code, shown):
    if "pyspark" in code and not os.environ.get("RATEPOOL_REQUIRE_SPARK"):
        pytest.importorskip("pyspark")
    # Spark's Python workers run this interpreter, which has pyarrow.
    os.environ.setdefault("PYSPARK_PYTHON", sys.executable)
    printed = io.StringIO()
    here = os.getcwd()
    os.chdir(ROOT)
    try:
        with contextlib.redirect_stdout(printed):
            exec(compile(code, "README.md", "exec"), {"__name__": "readme"})
    finally:
        os.chdir(here)
    assert printed.getvalue().rstrip("\n").splitlines() == shown.rstrip("\n").splitlines()
