#!/usr/bin/env bash
# make demo: the default warehouse scenario from scratch to results.
set -euo pipefail
OUT=${1:-demo_out}
BIN=.venv/bin
mkdir -p "$OUT"
if [ ! -f "$OUT/store/store.json" ]; then
  echo "== generating the default scenario (parcel-sorting warehouse) into $OUT/store"
  $BIN/wsad-synth scenario=warehouse out="$OUT/store" quiet=true > /dev/null
fi
echo "== checking the store"
$BIN/wsad-check "$OUT/store"
