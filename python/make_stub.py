"""Writes python/ratepool/__init__.pyi, the typed signatures of the package,
from the command line's own option definitions (so that the stub names every
option and cannot drift: python/tests/test_stub.py compares the committed
stub with a fresh one).

usage: python python/make_stub.py [--check]
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
# The installed package (with its native module), not the source tree beside this file.
sys.path = [p for p in sys.path if Path(p or ".").resolve() != HERE]

import ratepool  # noqa: E402
from ratepool import _native  # noqa: E402

STUB = HERE / "ratepool" / "__init__.pyi"

# The Python type of each placeholder the command line's help uses.
TYPES = {
    "N": "int",
    "K": "int",
    "T": "float",
    "P": "float",
    "Q": "float",
    "FILE": "Union[str, os.PathLike[str]]",
    "PROPERTY": "str",
    "FOLDER": "Union[str, os.PathLike[str]]",
    "COLUMN": "str",
    "CHAR": "str",
    "COLUMN=P": "str",
    "MODEL": "Model",
    "COLUMN[,COLUMN...]": "Union[str, Sequence[str]]",
    "VALUE[,VALUE...]": "Union[str, Sequence[Union[str, int]]]",
    "SCORE[,SCORE...]": "Union[str, Sequence[float]]",
}

# Options a Python argument stands for, per function.
TAKEN = {"fit": {"pair_counts"}, "score": {"prior"}, "fit_pairs": {"pair_counts"}}


def type_of(kind: str, placeholder: str, choices: list) -> str:
    if kind == "flag":
        return "bool"
    if choices:
        return "Literal[" + ", ".join(repr(c) for c in choices) + "]"
    return TYPES[placeholder]


def keywords(subcommand: str, taken: set) -> list:
    lines = []
    for name, kind, placeholder, choices, help in ratepool.options(subcommand):
        if name in taken:
            continue
        lines.append(f"    {name}: Optional[{type_of(kind, placeholder, choices)}] = None,  # {help}")
    return lines


def stub() -> str:
    models = ", ".join(repr(m) for m in _native.models())
    out = [
        '"""Typed signatures of ratepool (written by python/make_stub.py; do not edit)."""',
        "",
        "import os",
        "from typing import Any, Dict, List, Literal, Optional, Sequence, Tuple, Union",
        "",
        "from ._engine import Result as Result",
        "from .errors import FitError as FitError",
        "from .errors import InputError as InputError",
        "from .errors import RatepoolError as RatepoolError",
        "from .errors import UsageError as UsageError",
        "",
        f"Model = Literal[{models}]",
        "",
        "def options(subcommand: str) -> List[Tuple[str, str, str, List[str], str]]: ...",
        "",
        "def fit(",
        "    data: Any,",
        "    *,",
        *keywords("fit", TAKEN["fit"]),
        ") -> Result: ...",
        "",
        "def score(",
        "    data: Any,",
        "    prior: Union[str, os.PathLike[str], Dict[str, Any]],",
        "    *,",
        *keywords("score", TAKEN["score"]),
        ") -> Result: ...",
        "",
        "def fit_pairs(",
        "    pairs: Any,",
        "    weights: str,",
        "    *,",
        *keywords("fit", TAKEN["fit_pairs"]),
        ") -> Result: ...",
        "",
    ]
    return "\n".join(out)


if __name__ == "__main__":
    text = stub()
    if "--check" in sys.argv:
        sys.exit(0 if STUB.read_text() == text else "the stub is stale: run python python/make_stub.py")
    STUB.write_text(text)
