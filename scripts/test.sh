#!/usr/bin/env bash
# The project's one test command (README "Set-up on a fresh machine"): the
# Rust suite (library, CLI, fuzz campaign), then the Python package built
# from this checkout (`pip install ./python`) and its pytest suite, Spark
# local mode included (PySpark from PyPI; a Java runtime from Debian's
# packages is installed when none is found and we may install it).
set -euo pipefail
cd "$(dirname "$0")/.."
cargo test --release
if ! command -v java >/dev/null 2>&1; then
    if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
        echo "scripts/test.sh: no Java runtime found; installing Debian's default-jre-headless for the Spark tests" >&2
        apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq default-jre-headless >/dev/null
    else
        echo "scripts/test.sh: the Spark tests need a Java runtime (e.g. apt-get install default-jre-headless)" >&2
        exit 2
    fi
fi
python3 -m pip install --quiet --disable-pip-version-check ./python pytest "pandas<3" pyarrow mpmath pyspark
python3 -m pytest -q python/tests
