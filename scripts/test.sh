#!/usr/bin/env bash
# The whole test suite: set-up, then every test (unit, integration, doc-tests, bench smoke runs).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup.sh
cargo test --all-features
cargo test --benches
bash scripts/check-static-openblas.sh
