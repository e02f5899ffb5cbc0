"""How a Python call becomes a run of the engine: keyword options become the
command line's own options (named as there, with `_` for `-`), the data
becomes the run's input (a file path as is, anything else through the Arrow C
stream interface), the output table goes to a temporary Arrow IPC file that
pyarrow maps back, and the engine's errors become the package's exceptions.
"""

from __future__ import annotations

import json
import os
import re
import tempfile
from dataclasses import dataclass, field
from typing import Any, Dict, List, Optional, Sequence, Tuple

import pyarrow as pa
import pyarrow.parquet as pq

from . import _native
from .errors import FitError, InputError, RatepoolError, UsageError  # noqa: F401 (re-exported)

# Options whose place a Python argument takes: the data argument is the
# input, and `fit_pairs` names the pair table's group-count column itself.
_TAKEN = {"input"}


@dataclass
class Result:
    """What a run gives back.

    `table` is the output table (one row per group, or one per distinct pair
    from `fit_pairs`), `summary` the run's summary as the command line writes
    it to `--summary` (the prior, its standard errors, the checks, and
    `warnings`).
    """

    table: Optional[pa.Table]
    summary: Dict[str, Any]
    outputs: List[str] = field(default_factory=list)

    @property
    def warnings(self) -> List[str]:
        """The run's warnings, as in the summary (nothing is printed)."""
        return list(self.summary.get("warnings", []))

    def to_polars(self):
        """The table as a polars DataFrame (needs polars)."""
        import polars as pl

        return pl.from_arrow(self.table)

    def to_pandas(self):
        """The table as a pandas DataFrame (needs pandas)."""
        return self.table.to_pandas()

    def __repr__(self) -> str:
        rows = "no table" if self.table is None else f"{self.table.num_rows} rows"
        model = self.summary.get("model", "?") if isinstance(self.summary, dict) else "?"
        return f"<ratepool.Result {model}: {rows}, {len(self.warnings)} warnings>"


def options(subcommand: str) -> List[Tuple[str, str, str, List[str], str]]:
    """The options a subcommand takes from Python: (keyword, kind,
    placeholder, choices, help), the kind "flag" (a bool), "list" (a list or
    a comma-separated string) or "value"; the placeholder as the command
    line's help shows it (N, FILE, COLUMN, ...); the choices when they are few."""
    return [
        (name.replace("-", "_"), kind, placeholder, list(choices), help)
        for name, kind, placeholder, choices, help in _native.options(subcommand)
        if name not in _TAKEN
    ]


def _text(value: Any) -> str:
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if isinstance(value, bool):
        raise TypeError("a bool is not a value here")
    if isinstance(value, float):
        return repr(value)
    return str(value)


def argv_of(subcommand: str, given: Dict[str, Any]) -> List[str]:
    """The command line of a call: `subcommand` and one option per keyword."""
    known = {name: kind for name, kind, *_ in options(subcommand)}
    argv = [subcommand]
    for keyword, value in given.items():
        if keyword not in known:
            raise TypeError(
                f"{subcommand}() got an unexpected keyword argument '{keyword}'; "
                f"it takes: {', '.join(sorted(known))}"
            )
        if value is None:
            continue
        option = "--" + keyword.replace("_", "-")
        kind = known[keyword]
        if kind == "flag":
            if not isinstance(value, bool):
                raise TypeError(f"{keyword} takes True or False, got {value!r}")
            if value:
                argv.append(option)
        elif kind == "list":
            items = [value] if isinstance(value, (str, os.PathLike)) else list(value)
            argv += [option, ",".join(_text(v) for v in items)]
        else:
            try:
                argv += [option, _text(value)]
            except TypeError:
                raise TypeError(f"{keyword} takes a value, not {value!r}") from None
    return argv


_OPTION = re.compile(r"--([a-z][a-z0-9-]*)")


def _python_words(message: str) -> str:
    """The engine's message with each option named as its keyword."""
    return _OPTION.sub(lambda m: "`" + m.group(1).replace("-", "_") + "`", message)


def _exception(error: _native.EngineError) -> RatepoolError:
    kind, message, *rest = error.args
    row, column, reason = (rest + [None, None, None])[:3]
    message = _python_words(message)
    if kind == "invalid_row":
        return InputError(message, row=row, column=column, reason=reason)
    if kind == "input":
        return InputError(message)
    if kind == "usage":
        return UsageError(message)
    if kind == "fit":
        return FitError(message)
    return RatepoolError(message)


def _stream_of(data: Any) -> Any:
    """`data` as an object offering `__arrow_c_stream__`."""
    if hasattr(data, "__arrow_c_stream__"):
        return data
    if type(data).__module__.startswith("pyspark"):
        raise TypeError("a Spark DataFrame runs through ratepool.spark.fit, on the cluster")
    try:
        return pa.table(data)
    except (TypeError, pa.ArrowInvalid) as e:
        raise TypeError(
            "data must be a path to a CSV or Parquet file (or a folder of Parquet parts), or a "
            "table offering the Arrow PyCapsule interface (pyarrow, polars, pandas): "
            f"got {type(data).__name__}"
        ) from e


def run(
    subcommand: str,
    data: Any,
    given: Dict[str, Any],
    table_option: str = "output",
    scratch: Sequence[Tuple[str, Any]] = (),
) -> Result:
    """Runs `subcommand` on `data` with the keyword options `given`; the
    table is read from `table_option`'s file, a temporary Arrow IPC file unless
    the caller named one. `scratch` holds (keyword, text) pairs written to
    temporary files whose paths are passed as those options."""
    given = dict(given)
    with tempfile.TemporaryDirectory(prefix="ratepool-") as folder:
        for keyword, text in scratch:
            path = os.path.join(folder, f"{keyword}.json")
            with open(path, "w", encoding="utf-8") as f:
                f.write(text)
            given[keyword] = path
        wanted = given.get(table_option)
        if wanted is None:
            # An Arrow IPC file: read back by mapping it, no decoding.
            given[table_option] = os.path.join(folder, "table.arrow")
        # A pair table's run writes only the summary, so it must have a file.
        scratch_summary = os.path.join(folder, "summary.json")
        if given.get("summary") is None:
            given["summary"] = scratch_summary
        argv = argv_of(subcommand, given)
        if isinstance(data, (str, os.PathLike)):
            argv += ["--input", os.fspath(data)]
            stream = None
        else:
            argv += ["--input", "data"]
            stream = _stream_of(data)
        try:
            summary, outputs = _native.run(argv, stream, "data")
        except _native.EngineError as error:
            raise _exception(error) from None
        table_path = os.fspath(given[table_option])
        table = _read_table(table_path) if os.path.exists(table_path) else None
        outputs = [o for o in outputs if (wanted is not None or o != table_path) and o != scratch_summary]
        return Result(table=table, summary=json.loads(summary) or {}, outputs=outputs)


def _read_table(path: str) -> pa.Table:
    lowered = path.lower()
    if lowered.endswith(".csv"):
        import pyarrow.csv as pacsv

        return pacsv.read_csv(path)
    if lowered.endswith(".arrow"):
        if os.name == "posix":
            # Mapped, not copied: the mapping outlives the file's removal.
            return pa.ipc.open_file(pa.memory_map(path)).read_all()
        with pa.OSFile(path) as source:
            return pa.ipc.open_file(source).read_all()
    # Read whole into memory: the file may be in a folder about to be removed.
    return pq.read_table(path, memory_map=False)
