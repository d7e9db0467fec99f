#!/usr/bin/env bash
# The project's one test command (README "Set-up on a fresh machine"): the
# Rust suite (library, CLI, fuzz campaign), then the Python package built
# from this checkout (`pip install ./python`) and its pytest suite.
set -euo pipefail
cd "$(dirname "$0")/.."
cargo test --release
python3 -m pip install --quiet --disable-pip-version-check ./python pytest pandas pyarrow mpmath
python3 -m pytest -q python/tests
