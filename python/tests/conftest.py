"""Shared fixtures: the repository's demo data, and the command line built
from the same source (`cargo test` builds it; RATEPOOL_BIN names another)."""

from __future__ import annotations

import json
import os
import subprocess
from pathlib import Path

import pyarrow.parquet as pq
import pytest

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo-data"


def cli_binary() -> Path:
    given = os.environ.get("RATEPOOL_BIN")
    if given:
        return Path(given)
    target = Path(os.environ.get("CARGO_TARGET_DIR", ROOT / "target"))
    for profile in ("debug", "release"):
        candidate = target / profile / "ratepool"
        if candidate.exists():
            return candidate
    pytest.fail("no ratepool binary: run `cargo build` first, or set RATEPOOL_BIN")


class CommandLine:
    """Runs `ratepool` and reads back what it wrote."""

    def __init__(self, folder: Path):
        self.binary = cli_binary()
        self.folder = folder

    def run(self, *args: str, table: str = "--output"):
        output = self.folder / "cli-table.parquet"
        summary = self.folder / "cli-summary.json"
        argv = [str(self.binary), *args, table, str(output), "--summary", str(summary), "--quiet"]
        done = subprocess.run(argv, cwd=ROOT, capture_output=True, text=True)
        assert done.returncode == 0, done.stderr
        return pq.read_table(output), json.loads(summary.read_text())


@pytest.fixture
def cli(tmp_path: Path) -> CommandLine:
    return CommandLine(tmp_path)
