#!/usr/bin/env bash
# make demo: from the default warehouse scenario to comparison tables and plots.
#   1. generate the default scenario (a parcel-sorting warehouse, 12 cameras)
#   2. check the store
#   3. the three published recipes x 3 seeds, then a real ablation: the `bags` sweep preset
#      (sequential vs shuffled windows vs whole videos vs anomalous/normal pairs) x 3 seeds,
#      two jobs in parallel, all logged to MLflow
#   4. aggregate over seeds: tables with intervals and paired tests, plus plots
set -euo pipefail
OUT=${1:-demo_out}
JOBS=${JOBS:-2}
BIN=.venv/bin
URI="sqlite:///$(pwd)/$OUT/mlruns.db"
mkdir -p "$OUT"
start=$(date +%s)

if [ ! -f "$OUT/store/store.json" ]; then
  echo "== 1. generating the default scenario into $OUT/store"
  $BIN/wsad-synth scenario=warehouse out="$OUT/store" quiet=true > /dev/null
fi
echo "== 2. checking the store"
$BIN/wsad-check "$OUT/store"

sweep() {  # name, then wsad-train overrides
  local name=$1; shift
  if [ -f "$OUT/.done_$name" ]; then
    echo "   (already run; delete $OUT to start over)"
    return
  fi
  $BIN/wsad-train -m data.root="$OUT/store" seed=0,1,2 trainer.progress=false \
    hydra/launcher=workers hydra.launcher.n_jobs="$JOBS" tracking.uri="$URI" \
    tracking.experiment="$name" hydra.sweep.dir="$OUT/runs_$name" "$@" > "$OUT/$name.log" 2>&1 \
    || { echo "sweep failed; see $OUT/$name.log"; tail -5 "$OUT/$name.log"; exit 1; }
  grep -c "^  run folder" "$OUT/$name.log" | xargs -I{} echo "   {} runs finished (log: $OUT/$name.log)"
  touch "$OUT/.done_$name"
}

echo
echo "== 3a. the three recipes (topk, windows, mil_ranking) x 3 seeds, $JOBS jobs in parallel"
sweep recipes recipe=topk,windows,mil_ranking
$BIN/wsad-report --tracking-uri "$URI" --experiment recipes --baseline "recipe=topk" \
  --out "$OUT/report_recipes" --no-plots 2>/dev/null | sed -n 1,5p

echo
echo "== 3b. ablation: bag constructions x 3 seeds (recipe windows, $JOBS jobs in parallel)"
sweep demo recipe=windows sweep=bags

echo
echo "== 4. report (mean over seeds, 95% t-intervals, paired tests against shuffled windows)"
$BIN/wsad-report --tracking-uri "$URI" --experiment demo --baseline "bags=windows" \
  --out "$OUT/report" 2>/dev/null
echo
echo "   full report with every metric: $OUT/report/report.md (also .csv and .tex)"
echo "   recipes compared:               $OUT/report_recipes/report.md"
echo "   open the runs side by side:     make ui   (MLflow UI on http://127.0.0.1:5000)"
echo "   demo took $(( $(date +%s) - start )) s"
