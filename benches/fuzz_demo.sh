#!/usr/bin/env bash
# Coverage and crash figures for feeding libFuzzer on a demo service of examples/ (run
# in-process by the fuzz targets, with three planted bugs each). The arms of
# benches/fuzz_coverage.sh, on the demo target:
#   a  plain engine, empty corpus                       (DEMO_stream)
#   b  engine seeded with the training sessions         (DEMO_stream), replies removed
#   c  engine seeded with a `tracewalk seed` corpus     (DEMO_stream), same number of files
#   d  as c, plus the model-driven custom mutator       (DEMO_modeled)
#   e  structured decoding, empty corpus                (DEMO_structured); its `cov:` also
#      counts the edges of tracewalk's decoder, which runs inside the target: compare its
#      executions to the first crash, not its coverage
# Two figures per arm, ENGINE_SEEDS seeds each, medians:
#   cov      the engine's final `cov:` after RUNS executions; planted-bug panics count as
#            ordinary runs here (TRACEWALK_FUZZ_SURVIVE_PANICS), so every run has RUNS executions
#   crash    executions until the engine stops at its first crash (a planted bug), capped at
#            CRASH_RUNS; a run without a crash counts as more than the cap
# Usage: benches/fuzz_demo.sh [DEMO] [RUNS] [ENGINE_SEEDS] [CRASH_RUNS]
#        DEMO is lamp_hub (default) or shop_server; defaults 100000 executions, 5 seeds, RUNS.
set -euo pipefail
cd "$(dirname "$0")/.."
. benches/fuzz_corpora.sh
demo="${1:-lamp_hub}"
runs="${2:-100000}"
seeds="${3:-5}"
crash_runs="${4:-$runs}"
case "$demo" in
    lamp_hub) corpus=lamp-control ;;
    shop_server) corpus=shop-api ;;
    *) echo "benches/fuzz_demo.sh: DEMO must be lamp_hub or shop_server, not \`$demo\`" >&2; exit 2 ;;
esac
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT

target_dir="${CARGO_TARGET_DIR:-target}"
cargo build --release --quiet
fuzz/build-targets --quiet >/dev/null
host="$(rustc -vV | sed -n 's/^host: //p')"
bin="${CARGO_TARGET_DIR:-fuzz/target}/$host/release"
tw="$target_dir/release/tracewalk"

# b: the training sessions as a client sends them (requests only, one file per session).
training_corpus "$work/training" "$corpus"
files=$(ls "$work/training" | wc -l)

# c, d: a generated seed corpus with the same number of files, from the model the targets embed.
"$tw" learn "corpora/$corpus" --order 2,3 -o "$work/demo.model" -q
seed_corpus "$tw" "$work/demo.model" "$work/seeds" "$files"

run() { # binary, corpus source (or empty), seed, executions -> engine output on stdout
    local bin_name="$1" source="$2" seed="$3" n="$4" dir
    dir="$(mktemp -d "$work/run.XXXX")"
    [ -n "$source" ] && cp "$source"/* "$dir"/
    "$bin/$bin_name" "$dir" -runs="$n" -seed="$seed" -print_final_stats=1 \
        -artifact_prefix="$dir/" 2>&1 || true
    rm -rf "$dir"
}
median() { sort -n | awk '{a[NR]=$1} END {printf "%.0f\n", (NR%2) ? a[(NR+1)/2] : (a[NR/2]+a[NR/2+1])/2}'; }

echo "$demo in-process, $runs executions per coverage run, crash runs capped at $crash_runs,"
echo "$seeds engine seeds, $files corpus files in arms b-d"
printf '%-40s %6s  %-26s %9s  %s\n' "arm" "cov" "cov per seed" "to crash" "executions to first crash per seed (bug line)"
declare -A med crashmed
for a in a b c d e; do
    case $a in
        a) name="a plain engine, empty corpus"; b=${demo}_stream; src="" ;;
        b) name="b seeded with the training sessions"; b=${demo}_stream; src="$work/training" ;;
        c) name="c seeded with tracewalk seed"; b=${demo}_stream; src="$work/seeds" ;;
        d) name="d tracewalk seed + model mutator"; b=${demo}_modeled; src="$work/seeds" ;;
        e) name="e structured decoding, empty corpus"; b=${demo}_structured; src="" ;;
    esac
    covs=() execs=() shown=()
    for s in $(seq 1 "$seeds"); do
        covs+=("$(TRACEWALK_FUZZ_SURVIVE_PANICS=1 run "$b" "$src" "$s" "$runs" \
            | sed -n 's/.*DONE *cov: \([0-9]*\).*/\1/p' | tail -1)")
        out="$(run "$b" "$src" "$s" "$crash_runs")"
        units=$(printf '%s\n' "$out" | sed -n 's/^stat::number_of_executed_units: *//p' | tail -1)
        if printf '%s\n' "$out" | grep -q 'deadly signal'; then
            line=$(printf '%s\n' "$out" | sed -n "s/.*panicked at .*$demo\.rs:\([0-9]*\):.*/\1/p" | head -1)
            execs+=("$units") shown+=("$units(:$line)")
        else
            execs+=(999999999999) shown+=(">$crash_runs")
        fi
    done
    med[$a]=$(printf '%s\n' "${covs[@]}" | median)
    crashmed[$a]=$(printf '%s\n' "${execs[@]}" | median)
    [ "${crashmed[$a]}" -ge 999999999999 ] && crashmed[$a]=">$crash_runs"
    printf '%-40s %6s  %-26s %9s  %s\n' "$name" "${med[$a]}" "${covs[*]}" "${crashmed[$a]}" "${shown[*]}"
done
awk -v a="${med[a]}" -v b="${med[b]}" -v c="${med[c]}" -v d="${med[d]}" -v e="${med[e]}" 'BEGIN {
    printf "coverage ratios: c/b %.2f  d/b %.2f  c/a %.2f  d/a %.2f   (goal: c, d >= 1.2x b and >= 2x a)\n",
        c/b, d/b, c/a, d/a }'
echo "load average: $(cut -d' ' -f1-3 /proc/loadavg)"
