#!/usr/bin/env bash
# Side-by-side wall time, one run each in turn, on one generated model:
#   cat FILE >/dev/null        (the physical limit: reading the file once)
#   loadline measure FILE      (decode, infer, measure, print)
#   python3-onnx: onnx.load + onnx.shape_inference.infer_shapes
# Usage: scripts/bench-measure.sh [MB] (default 200). Quote ratios from one run.
set -euo pipefail
cd "$(dirname "$0")/.."
mb=${1:-200}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
go build -o "$work/loadline" ./cmd/loadline
go run ./internal/benchgen -mb "$mb" "$work/model.onnx"
f="$work/model.onnx"

t() { # prints the best wall time of 3 runs, in seconds
  local best=
  for _ in 1 2 3; do
    local s e
    s=$(date +%s.%N); "$@" >/dev/null; e=$(date +%s.%N)
    best=$(echo "$s $e $best" | awk '{d=$2-$1; if ($3=="" || d<$3) print d; else print $3}')
  done
  echo "$best"
}
cat_s=$(t cat "$f")
ll_s=$(t "$work/loadline" measure --dim batch=1 "$f")
py_s=$(t /usr/bin/python3 -c "import onnx,sys; onnx.shape_inference.infer_shapes(onnx.load(sys.argv[1]))" "$f")
printf 'file: %s bytes\n' "$(stat -c %s "$f")"
printf 'cat >/dev/null        %8.3f s\n' "$cat_s"
printf 'loadline measure      %8.3f s   (%.2f× cat)\n' "$ll_s" "$(echo "$ll_s $cat_s" | awk '{print $1/$2}')"
printf 'python onnx infer     %8.3f s   (loadline takes %.3f of its time)\n' "$py_s" "$(echo "$ll_s $py_s" | awk '{print $1/$2}')"
