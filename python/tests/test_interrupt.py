"""Ctrl-C stops a long run: the engine asks the interpreter for pending
signals at every batch and phase, raises KeyboardInterrupt, and writes
nothing."""

from __future__ import annotations

import _thread
import threading
import time

import numpy as np
import pyarrow as pa

import ratepool


def test_a_keyboard_interrupt_stops_a_long_fit_and_writes_nothing(tmp_path):
    groups = 3_000_000
    rng = np.random.default_rng(20261204)
    trials = rng.integers(1, 200, groups)
    table = pa.table({
        "id": pa.array(np.arange(groups)),
        "k": pa.array(rng.binomial(trials, 0.3)),
        "n": pa.array(trials),
    })
    output = tmp_path / "table.parquet"
    timer = threading.Timer(0.5, _thread.interrupt_main)
    started = time.monotonic()
    timer.start()
    try:
        ratepool.fit(table, model="beta-binomial", group="id", successes="k", trials="n",
                     batch_rows=10_000, output=str(output), summary=str(tmp_path / "s.json"))
    except KeyboardInterrupt:
        stopped = time.monotonic() - started
    else:
        raise AssertionError("the run finished before the interrupt; make it longer")
    finally:
        timer.cancel()
    assert stopped < 5.0, stopped
    assert list(tmp_path.iterdir()) == []
