#!/usr/bin/env bash
# Set up, build, and run every test (GoogleTest, 2-rank MPI, CLI and analysis).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/bootstrap.sh
bash scripts/build.sh
source scripts/env.sh
ctest --test-dir build --output-on-failure -j 2
