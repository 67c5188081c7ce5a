#!/usr/bin/env bash
# Prints tracewalk's performance figures beside baselines measured in the same run:
#   learn (order 3) on a generated access log vs `wc -w` on the same file and a naive Python
#   collections.Counter over the same n-grams; generation (alias vs linear-scan sampler) and
#   model load (binary vs YAML) from the `figures` bench binary, plus a fresh process loading
#   the large model.
# Usage: benches/figures.sh            (env: SIZE_MB=200 RUNS=3 NAIVE_RUNS=1 CARGO_TARGET_DIR)
# Wall time and peak memory come from /usr/bin/time -f '%e %M'; medians over RUNS runs.
# The log is written to a temporary directory and removed at exit; nothing is committed.
set -euo pipefail
cd "$(dirname "$0")/.."
SIZE_MB=${SIZE_MB:-200}
RUNS=${RUNS:-3}
NAIVE_RUNS=${NAIVE_RUNS:-1}
TARGET=${CARGO_TARGET_DIR:-target}
[ -x /usr/bin/time ] || { echo "figures.sh: needs GNU time at /usr/bin/time" >&2; exit 2; }

tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

echo "== machine: $(nproc) cores; load average at start: $(cut -d' ' -f1-3 /proc/loadavg)"
cargo build --release --quiet
bin="$TARGET/release/tracewalk"
log="$tmp/access.log"
python3 benches/gen_access_log.py "$SIZE_MB" "$log" > /dev/null
bytes=$(stat -c %s "$log")
cat "$log" > /dev/null # into the page cache, so every contender reads from memory

# run NAME CMD...: one measured run, appends "wall peak_kib" to $tmp/NAME.
run() {
  local name=$1
  shift
  /usr/bin/time -f '%e %M' -o "$tmp/one" "$@" > /dev/null 2> "$tmp/err" || {
    cat "$tmp/err" >&2
    exit 1
  }
  tail -n 1 "$tmp/one" >> "$tmp/$name"
}
# median NAME COLUMN: median of a column of $tmp/NAME.
median() { awk -v c="$2" '{print $c}' "$tmp/$1" | sort -g | awk '{v[NR]=$1} END {print v[int((NR+1)/2)]}'; }

for _ in $(seq "$RUNS"); do # interleaved, so that a busy moment hits all contenders alike
  run wc wc -w "$log"
  run learn "$bin" learn "$log" --format lines --order 3 -o "$tmp/access.model" -q
done
for _ in $(seq "$NAIVE_RUNS"); do
  run naive python3 benches/naive_counter.py "$log"
done

learn_s=$(median learn 1)
learn_kib=$(median learn 2)
wc_s=$(median wc 1)
naive_s=$(median naive 1)
naive_kib=$(median naive 2)
mb=$(awk -v b="$bytes" 'BEGIN {printf "%.1f", b / 1e6}')
echo
echo "== learn: $mb MB access log (benches/gen_access_log.py), order 3; medians of $RUNS runs (naive: $NAIVE_RUNS)"
awk -v l="$learn_s" -v lk="$learn_kib" -v w="$wc_s" -v n="$naive_s" -v nk="$naive_kib" -v b="$bytes" 'BEGIN {
  printf "  %-34s %8.2f s  %7.1f MB/s  peak %6.0f MiB\n", "tracewalk learn --order 3", l, b / 1e6 / l, lk / 1024
  printf "  %-34s %8.2f s  %7.1f MB/s\n", "wc -w (baseline)", w, b / 1e6 / w
  printf "  %-34s %8.2f s  %7.1f MB/s  peak %6.0f MiB\n", "naive Python Counter (baseline)", n, b / 1e6 / n, nk / 1024
  printf "  learn / wc -w      = %.2fx the time   (goal: at most 2x)\n", l / w
  printf "  naive / learn      = %.1fx faster      (goal: at least 30x)\n", n / l
}'

echo
echo "== generation and model load (cargo bench --bench figures; medians of 5 runs)"
mkdir -p "$tmp/models"
TRACEWALK_FIGURES_DIR="$tmp/models" cargo bench --quiet --bench figures 2> "$tmp/bench-err" || {
  cat "$tmp/bench-err" >&2
  exit 1
}
for _ in $(seq "$RUNS"); do
  run fresh_bin "$bin" gen "$tmp/models/large.bin" -n 1 --seed 1
  run fresh_yaml "$bin" gen "$tmp/models/large.yaml" -n 1 --seed 1
done
echo "  fresh process loading the large model and generating one trace (tracewalk gen -n 1):"
echo "    binary $(median fresh_bin 1) s, peak $(awk -v k="$(median fresh_bin 2)" 'BEGIN {printf "%.0f", k / 1024}') MiB;" \
  "YAML $(median fresh_yaml 1) s, peak $(awk -v k="$(median fresh_yaml 2)" 'BEGIN {printf "%.0f", k / 1024}') MiB"
echo
echo "== load average at end: $(cut -d' ' -f1-3 /proc/loadavg)"
