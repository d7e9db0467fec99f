"""Shared helpers of the Python tests: the repository root, the command-line
binary (built by `cargo build --release` when missing) and CSV books."""

from __future__ import annotations

import csv
import os
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="session")
def cli() -> Path:
    """Path of the saltus binary of this checkout (release profile)."""
    exe = ROOT / "target" / "release" / "saltus"
    if not exe.exists():
        subprocess.run(["cargo", "build", "--release", "--bin", "saltus"], cwd=ROOT, check=True)
    return exe


def run_cli(exe: Path, args, tmp_path: Path):
    """Runs the binary; returns (header, rows) of its CSV output."""
    out = tmp_path / "out.csv"
    proc = subprocess.run([str(exe), *args, "-o", str(out), "-q"], capture_output=True, text=True)
    assert proc.returncode in (0, 1), proc.stderr
    with open(out, newline="") as f:
        rows = list(csv.reader(f))
    return rows[0], rows[1:]


def write_csv(path: Path, header, rows) -> Path:
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(header)
        w.writerows(rows)
    return path


