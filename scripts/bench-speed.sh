#!/usr/bin/env bash
# Measures the figures of the README's "Speed" section and, with --readme,
# writes that section anew between its markers. Never edit the section by
# hand: run this script on the machine whose figures you want quoted.
#
# Each figure is the median of RUNS runs (default 3) of the whole process,
# wall-clock seconds and peak resident memory from /usr/bin/time; the
# commands compared run in turn (A B A B ...), so a machine that slows down
# slows both. Ratios are of medians taken in the same run of this script.
#
#   scripts/bench-speed.sh [--readme] [--runs N]
#
# Needs: go, git, /usr/bin/time, python3 with the onnx package
# (python3-onnx) for the Python peer; about 2 GB in $TMPDIR.
set -euo pipefail
cd "$(dirname "$0")/.."
readme=0
runs=3
while [ $# -gt 0 ]; do
  case $1 in
    --readme) readme=1 ;;
    --runs) runs=$2; shift ;;
    *) echo "usage: $0 [--readme] [--runs N]" >&2; exit 2 ;;
  esac
  shift
done
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
go build -o "$work/loadline" ./cmd/loadline
go build -o "$work/benchgen" ./internal/benchgen
ll="$work/loadline"
py=/usr/bin/python3
"$py" -c 'import onnx' 2>/dev/null || { echo "python3 with onnx is needed (apt install python3-onnx)" >&2; exit 3; }

# run CMD...: one run; prints "wall_seconds peak_kib". The wall time is
# taken here to the millisecond (/usr/bin/time gives hundredths, too coarse
# for runs of a few hundredths); /usr/bin/time gives the peak memory.
run() {
  local t0 t1
  t0=$(date +%s%N)
  /usr/bin/time -f '%M' -o "$work/time" "$@" >/dev/null 2>"$work/stderr" || {
    echo "failed: $*" >&2; cat "$work/stderr" >&2; exit 1; }
  t1=$(date +%s%N)
  echo "$(awk -v a="$t0" -v b="$t1" 'BEGIN {printf "%.3f", (b - a) / 1e9}') $(cat "$work/time")"
}
# median of the numbers on stdin
median() { sort -g | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }

# pair NAME_A NAME_B -- CMD_A... -- CMD_B...: RUNS runs of each in turn;
# sets ${NAME}_s (median wall seconds), ${NAME}_mib (median peak MiB) and
# ${NAME}_kib (the same in KiB, for ratios).
pair() {
  local a=$1 b=$2; shift 3
  local cmd_a=() cmd_b=()
  while [ "$1" != "--" ]; do cmd_a+=("$1"); shift; done; shift
  cmd_b=("$@")
  run "${cmd_a[@]}" >/dev/null; run "${cmd_b[@]}" >/dev/null # warm-up
  : >"$work/a"; : >"$work/b"
  for _ in $(seq "$runs"); do
    run "${cmd_a[@]}" >>"$work/a"
    run "${cmd_b[@]}" >>"$work/b"
  done
  printf -v "${a}_s" '%s' "$(cut -d' ' -f1 "$work/a" | median)"
  printf -v "${a}_mib" '%s' "$(cut -d' ' -f2 "$work/a" | median | awk '{printf "%.0f", $1/1024}')"
  printf -v "${a}_kib" '%s' "$(cut -d' ' -f2 "$work/a" | median)"
  printf -v "${b}_s" '%s' "$(cut -d' ' -f1 "$work/b" | median)"
  printf -v "${b}_mib" '%s' "$(cut -d' ' -f2 "$work/b" | median | awk '{printf "%.0f", $1/1024}')"
  printf -v "${b}_kib" '%s' "$(cut -d' ' -f2 "$work/b" | median)"
}
ratio() { awk -v a="$1" -v b="$2" 'BEGIN {printf "%.2f", (b > 0 ? a / b : 0)}'; }
mb() { awk -v n="$(stat -c %s "$1")" 'BEGIN {printf "%.0f", n / 1e6}'; }
# times_file KIB FILE: peak memory of KIB KiB as a multiple of FILE's size,
# both in bytes.
times_file() { awk -v k="$1" -v n="$(stat -c %s "$2")" 'BEGIN {printf "%.2f", k * 1024 / n}'; }

echo "generating inputs in $work" >&2
"$work/benchgen" -mb 200 "$work/large.onnx" >/dev/null
"$work/benchgen" -nodes 100000 "$work/nodes.onnx" >/dev/null
"$work/benchgen" -repo 20 -mb 20 "$work/repo20"
"$work/benchgen" -repo 500 -mb 0 -pack "$work/repo500"
"$work/benchgen" -repo 2000 -mb 0 -pack "$work/repo2000"
pyinfer='import onnx, sys; onnx.shape_inference.infer_shapes(onnx.load(sys.argv[1]))'

echo "a large model: loadline measure beside cat and the Python peer" >&2
pair cat llL -- cat "$work/large.onnx" -- "$ll" measure --dim batch=1 "$work/large.onnx"
pair pyL llL2 -- "$py" -c "$pyinfer" "$work/large.onnx" -- "$ll" measure --dim batch=1 "$work/large.onnx"

echo "a model of 100,000 small nodes: loadline measure beside the Python peer" >&2
pair pyN llN -- "$py" -c "$pyinfer" "$work/nodes.onnx" -- "$ll" measure --dim batch=1 "$work/nodes.onnx"

echo "a cold check of 20 changed models of 20 MB beside git cat-file --batch on their 40 blobs" >&2
(cd "$work/repo20" && { git ls-tree -r HEAD~1 models/; git ls-tree -r HEAD models/; } | awk '{print $3}') >"$work/ids"
pair cold catfile -- env -C "$work/repo20" "$ll" check --no-cache --base HEAD~1 --head HEAD --format json \
  -- sh -c "git -C '$work/repo20' cat-file --batch <'$work/ids'"

echo "warm re-checks of 500 and of 2,000 changed models" >&2
env -C "$work/repo500" "$ll" check --base HEAD~1 --head HEAD >/dev/null 2>&1 || true
env -C "$work/repo2000" "$ll" check --base HEAD~1 --head HEAD >/dev/null 2>&1 || true
pair warm500 warm2000 -- env -C "$work/repo500" "$ll" check --base HEAD~1 --head HEAD --format json \
  -- env -C "$work/repo2000" "$ll" check --base HEAD~1 --head HEAD --format json

machine="$(nproc) cores ($(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ *//')), $(awk '/MemTotal/ {printf "%.0f GiB", $2/1048576}' /proc/meminfo), $(uname -sr)"
section=$(cat <<EOF
Measured by \`scripts/bench-speed.sh\` on $(date -u +%Y-%m-%d), on $machine, with
$(go version | cut -d' ' -f3) and onnx $("$py" -c 'import onnx; print(onnx.__version__)'): medians of $runs runs of the whole
process, commands compared run in turn, peak resident memory from \`/usr/bin/time\`. loadline
maps a model file and gives its pages back as it reads past them, so its peak resident memory is
mostly what it allocated; the kernel keeps the pages in its page cache, as for any reader. The
machine is shared, so quote the ratios rather than the seconds.

| what | loadline | beside it | ratio |
| --- | --- | --- | --- |
| \`measure\`, a generated $(mb "$work/large.onnx") MB model | ${llL_s} s, ${llL_mib} MiB | \`cat\` ${cat_s} s | $(ratio "$llL_s" "$cat_s")× cat; memory $(times_file "$llL_kib" "$work/large.onnx")× the file |
| same file | ${llL2_s} s | Python \`onnx.load\` + \`infer_shapes\` ${pyL_s} s | $(ratio "$llL2_s" "$pyL_s")× Python |
| \`measure\`, 100,000 small nodes ($(mb "$work/nodes.onnx") MB) | ${llN_s} s, ${llN_mib} MiB | Python ${pyN_s} s, ${pyN_mib} MiB | $(ratio "$llN_s" "$pyN_s")× Python; memory $(times_file "$llN_kib" "$work/nodes.onnx")× the file |
| cold \`check\`, 20 changed models of 20 MB (40 blobs) | ${cold_s} s, ${cold_mib} MiB | \`git cat-file --batch\` on the 40 blobs ${catfile_s} s | $(ratio "$cold_s" "$catfile_s")× git |
| warm \`check\`, 2,000 changed models | ${warm2000_s} s | 500 changed models ${warm500_s} s | $(ratio "$warm2000_s" "$warm500_s")× |

Go benchmarks of the same paths, with allocations:
\`go test ./measure -run '^\$' -bench 'MeasureLarge|MeasureNodes100k|PlanArena10k' -benchmem\`,
\`go test ./check -run '^\$' -bench 'Check20Models|WarmCheck' -benchtime 3x -benchmem\`.
EOF
)
echo "$section"
if [ "$readme" = 1 ]; then
  awk -v section="$section" '
    /<!-- speed:begin -->/ {print; print section; skip = 1; next}
    /<!-- speed:end -->/ {skip = 0}
    !skip {print}' README.md >"$work/README.md"
  grep -q '<!-- speed:begin -->' README.md || { echo "README.md has no speed markers" >&2; exit 1; }
  cp "$work/README.md" README.md
  echo "README.md: speed section rewritten" >&2
fi
