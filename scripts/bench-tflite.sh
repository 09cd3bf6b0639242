#!/usr/bin/env bash
# Side-by-side wall time, best of 3 runs each, for TFLite files:
#   cat FILE >/dev/null        (the physical limit: reading the file once)
#   loadline measure FILE      (decode, check stored shapes, measure, print)
# on the largest shared TFLite model (../shared/models/tflite, when present)
# and on a generated float32 TFLite model of about MB megabytes.
# Usage: scripts/bench-tflite.sh [MB] (default 200). Quote ratios from one run.
set -euo pipefail
cd "$(dirname "$0")/.."
mb=${1:-200}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
go build -o "$work/loadline" ./cmd/loadline
go run ./internal/benchgen -format tflite -mb "$mb" "$work/model.tflite" >/dev/null

t() { # prints the best wall time of 3 runs, in seconds
  local best=
  for _ in 1 2 3; do
    local s e
    s=$(date +%s.%N); "$@" >/dev/null; e=$(date +%s.%N)
    best=$(echo "$s $e $best" | awk '{d=$2-$1; if ($3=="" || d<$3) print d; else print $3}')
  done
  echo "$best"
}
files=()
shared=../shared/models/tflite
if [ -d "$shared" ]; then
  files+=("$(ls -S "$shared"/*.tflite | head -1)")
fi
files+=("$work/model.tflite")
for f in "${files[@]}"; do
  cat_s=$(t cat "$f")
  ll_s=$(t "$work/loadline" measure "$f")
  printf '%s: %s bytes\n' "$(basename "$f")" "$(stat -c %s "$f")"
  printf '  cat >/dev/null      %8.4f s\n' "$cat_s"
  printf '  loadline measure    %8.4f s   (%.2f× cat)\n' "$ll_s" "$(echo "$ll_s $cat_s" | awk '{print $1/$2}')"
done
