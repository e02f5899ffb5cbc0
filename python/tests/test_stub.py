"""The typed stub names every option of the command line, with its type, and
is the one python/make_stub.py writes from the command line's definitions."""

from __future__ import annotations

import ast
import importlib.util
from pathlib import Path

import ratepool

PYTHON = Path(__file__).resolve().parents[1]


def load_generator():
    spec = importlib.util.spec_from_file_location("make_stub", PYTHON / "make_stub.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_the_committed_stub_is_the_generated_one():
    assert (PYTHON / "ratepool" / "__init__.pyi").read_text() == load_generator().stub()


def test_every_option_of_fit_and_score_is_a_typed_keyword():
    tree = ast.parse((PYTHON / "ratepool" / "__init__.pyi").read_text())
    functions = {f.name: f for f in tree.body if isinstance(f, ast.FunctionDef)}
    for function, subcommand, taken in [("fit", "fit", {"pair_counts"}), ("score", "score", {"prior"})]:
        stubbed = {a.arg: ast.unparse(a.annotation) for a in functions[function].args.kwonlyargs}
        for name, kind, *_ in ratepool.options(subcommand):
            if name in taken:
                continue
            assert name in stubbed, (function, name)
            assert (stubbed[name] == "Optional[bool]") == (kind == "flag"), (function, name)
    assert "Literal['plug-in', 'corrected']" in ast.unparse(functions["fit"])
