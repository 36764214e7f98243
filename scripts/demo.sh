#!/usr/bin/env bash
# The demo: set-up, build, then the main job on the invented data set in data/demo/
# (Ni(II)–bromide in a perchlorate brine, three bromide levels, 5–90 °C; see data/README.md).
# Results go to out/demo/ (rewritten on every demo run).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup.sh
cargo build --release --quiet --bin isosbestic
bin=target/release/isosbestic

echo "== 1. inspect: what the spectra hold (CSV tables)"
"$bin" inspect --spectra data/demo/spectra.csv --samples data/demo/samples.csv

echo
echo "== 2. inspect: the Br-0.5 series read from JCAMP-DX files"
"$bin" inspect --jcamp data/demo/jcamp/*.jdx --samples data/demo/samples_jcamp.csv --no-evolving

echo
echo "== 3. fit: global fit of ΔH°, ΔS° to all 54 spectra (run configuration data/demo/fit.toml)"
"$bin" fit --config data/demo/fit.toml --out out/demo --force

echo
echo "== 4. compare: the fitted aqua-ion spectrum against reference absorptivities (data/reference/)"
"$bin" compare --fit out/demo --reference data/reference/absorptivities.csv --map '[Ni(H2O)6]2+=Ni' --out out/demo --force

echo
echo "== 5. vanthoff: a K(T) table fitted on its own"
"$bin" vanthoff --k-table data/demo/k_table.csv --at-c 25

echo
echo "== 6. global fit vs the classic two-wavelength estimates: the dilute-bromide experiment"
echo "   (one complex, weak overlapping aqua-ion band; simulated from data/demo/dilute/plan.toml)"
"$bin" simulate --model data/demo/dilute/model_truth.toml --plan data/demo/dilute/plan.toml \
  --out out/demo-dilute/data --force
"$bin" fit --spectra out/demo-dilute/data/spectra.csv --samples out/demo-dilute/data/samples.csv \
  --model data/demo/dilute/model.toml --expansion water --out out/demo-dilute/fit --force
echo "   (true ΔH° of NiBr: 14.000 kJ/mol, data/demo/dilute/model_truth.toml)"

echo
echo "Reports and tables: out/demo/ (report.html with every figure, vant_hoff.svg, report.json,"
echo "parameters.csv, thermodynamics.csv, concentrations.csv, pure_spectra.csv, vant_hoff_points.csv,"
echo "comparison.csv). The invented true values are in data/demo/truth.json."
