#!/usr/bin/env bash
# Regenerate every published figure from scratch: run each sweep into its own result store, draw the
# figures, and copy the plotted numbers (CSV) and captions into experiments/results/ for review.
#
#   bash experiments/run_all.sh [RUN_DIR]        # from the repository root; RUN_DIR defaults to runs/
#
# QGP_WORKERS sets the worker processes (default 2, the size these sweeps were planned for).
# Stores and figures stay in RUN_DIR (not committed). Rerunning resumes: finished points are skipped.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
run_dir="${1:-runs}"
workers="${QGP_WORKERS:-2}"
mkdir -p "$run_dir" "$here/results"

figures=(
  "fig1 fig1_error_vs_qubits"
  "fig2 fig2_error_vs_condition"
  "fig3 fig3_success_probability"
  "fig4 fig4_noise_tradeoff"
  "fig5 fig5_taper_sparsity"
  "fig6 fig6_circuit_cost"
  "fig7 fig7_scaling"
  "fig8 fig8_qsvt_vs_phase_estimation"
  "fig8b fig8_qsvt_vs_phase_estimation"   # fig. 8 on scikit-learn's diabetes data
  "fig9 fig9_gate_noise"
  "fig9b fig9_gate_noise"   # fig. 9 on scikit-learn's diabetes data
)

for entry in "${figures[@]}"; do
  read -r sweep name <<<"$entry"
  start=$SECONDS
  qgp sweep "$here/$sweep.toml" --store "$run_dir/$sweep.sqlite" --workers "$workers"
  qgp figures "$run_dir/$sweep.sqlite" --out "$run_dir/$sweep" --force   # its own folder: redrawn on every run
  # Copied under the sweep's name (fig1_… from fig1, fig8b_… from fig8b), so two stores of one figure do not collide.
  dest="$here/results/${sweep}_${name#*_}"
  cp "$run_dir/$sweep/$name.csv" "$dest.csv"
  cp "$run_dir/$sweep/$name.txt" "$dest.txt"
  echo "$sweep: $((SECONDS - start)) s (sweep and figures) -> $run_dir/$sweep/$name.{pdf,png}"
done

# At scale (`qgp scale`): the conditioning audit and the fault-tolerant cost table on the bundled radar
# survey, without and with the taper. Its files (CSV, JSON, figures) are copied whole into results/.
for entry in "scale_rbf --demo" "scale_tapered $here/scale_tapered.toml"; do
  read -r name source <<<"$entry"
  start=$SECONDS
  qgp scale $source --out "$run_dir/$name" --force
  mkdir -p "$here/results/$name"
  cp "$run_dir/$name"/{conditioning.csv,costs.csv,scale.json} "$here/results/$name/"
  echo "$name: $((SECONDS - start)) s -> $run_dir/$name/figures/{conditioning,costs}.{pdf,png}"
done

# Training (`qgp fit`): the log marginal likelihood from the circuits and circuit ML-II, on the demo and on
# scikit-learn's diabetes data, for phase estimation with the walk and the exact oracle and for QSVT.
for name in fit_demo_walk fit_demo_exact fit_demo_qsvt fit_diabetes_walk fit_diabetes_exact fit_diabetes_qsvt; do
  start=$SECONDS
  qgp fit "$here/$name.toml" --out "$run_dir/$name" --force
  mkdir -p "$here/results/$name"
  cp "$run_dir/$name"/{fit.json,sizes.csv,surface.csv} "$here/results/$name/"
  echo "$name: $((SECONDS - start)) s -> $run_dir/$name/figures/{lml_error,hyperparameters,surface}.{pdf,png}"
done
