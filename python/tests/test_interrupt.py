"""Ctrl-C stops a long run: the engine asks the interpreter for pending
signals at every batch and phase, raises KeyboardInterrupt, and writes
nothing."""

from __future__ import annotations

import _thread
import signal
import threading
import time

import numpy as np
import pyarrow as pa
import pytest

import ratepool

GROUPS = 3_000_000


def groups(model: str):
    rng = np.random.default_rng(20261204)
    if model == "beta-binomial":
        trials = rng.integers(1, 200, GROUPS)
        table = pa.table({"id": np.arange(GROUPS), "k": rng.binomial(trials, 0.3), "n": trials})
        return table, dict(successes="k", trials="n")
    stars = {f"stars_{level}": rng.poisson(2.0 * level, GROUPS) for level in range(1, 6)}
    return pa.table({"id": np.arange(GROUPS), **stars}), dict(level_counts=list(stars))


@pytest.mark.parametrize("model", ["beta-binomial", "dirichlet-multinomial"])
def test_a_keyboard_interrupt_stops_a_long_fit_and_writes_nothing(tmp_path, model):
    table, columns = groups(model)
    output = tmp_path / "table.parquet"
    # Python's own Ctrl-C handler, whatever the launcher left: a job started in
    # the background by a non-interactive shell inherits SIGINT ignored, and
    # then interrupt_main does nothing.
    inherited = signal.signal(signal.SIGINT, signal.default_int_handler)
    timer = threading.Timer(0.5, _thread.interrupt_main)
    started = time.monotonic()
    timer.start()
    try:
        ratepool.fit(table, model=model, group="id", **columns, batch_rows=10_000,
                     output=str(output), summary=str(tmp_path / "s.json"))
    except KeyboardInterrupt:
        stopped = time.monotonic() - started
    else:
        raise AssertionError("the run finished before the interrupt; make it longer")
    finally:
        timer.cancel()
        signal.signal(signal.SIGINT, inherited)
    assert stopped < 5.0, stopped
    assert list(tmp_path.iterdir()) == []
