#!/usr/bin/env bash
# The demo: set-up, build, then the main job on the invented data set in data/demo/.
# Until the global fit lands, the demo inspects the data (summary, rank, evolving factors),
# once from the CSV tables and once from the JCAMP-DX files of one series.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup.sh
cargo build --release --quiet --bin isosbestic
bin=target/release/isosbestic

echo "== isosbestic inspect (CSV tables: 3 series, 5–90 °C)"
"$bin" inspect --spectra data/demo/spectra.csv --samples data/demo/samples.csv

echo
echo "== isosbestic inspect (JCAMP-DX files of the Br-0.5 series)"
"$bin" inspect --jcamp data/demo/jcamp/*.jdx --samples data/demo/samples_jcamp.csv
