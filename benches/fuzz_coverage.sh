#!/usr/bin/env bash
# Coverage figure for feeding libFuzzer (issue: seed corpora and a model-driven mutator).
# Target: the third-party httparse crate fed a stream of HTTP/1.1 requests. Four arms, the same
# number of executions each, several engine seeds; prints the engine's final `cov:` figure:
#   a  plain engine, empty corpus                       (httparse_stream)
#   b  engine seeded with the training requests         (httparse_stream)
#   c  engine seeded with a `tracewalk seed` corpus     (httparse_stream), same number of files
#   d  as c, plus the model-driven custom mutator       (httparse_modeled)
# Usage: benches/fuzz_coverage.sh [RUNS] [SEEDS]     (defaults: 200000 executions, 5 seeds)
set -euo pipefail
cd "$(dirname "$0")/.."
. benches/fuzz_corpora.sh
runs="${1:-200000}"
seeds="${2:-5}"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT

cargo build --release --quiet
fuzz/build-targets --quiet >/dev/null
host="$(rustc -vV | sed -n 's/^host: //p')"
bin="${CARGO_TARGET_DIR:-fuzz/target}/$host/release"
tw="${CARGO_TARGET_DIR:-target}/release/tracewalk"

# b: the training requests, one file per session (responses removed: the harness parses requests).
training_corpus "$work/training" shop-api
files=$(ls "$work/training" | wc -l)

# c, d: a generated seed corpus with the same number of files, from the model the targets embed.
"$tw" learn corpora/shop-api --order 2,3 -o "$work/shop.model" -q
seed_corpus "$tw" "$work/shop.model" "$work/seeds" "$files"

arm() { # arm name, binary, corpus source (or empty), seed -> prints final cov
    local bin_name="$1" source="$2" seed="$3" dir
    dir="$(mktemp -d "$work/run.XXXX")"
    [ -n "$source" ] && cp "$source"/* "$dir"/
    "$bin/$bin_name" "$dir" -runs="$runs" -seed="$seed" -print_final_stats=1 2>&1 \
        | sed -n 's/.*DONE *cov: \([0-9]*\).*/\1/p' | tail -1
    rm -rf "$dir"
}
median() { sort -n | awk '{a[NR]=$1} END {print (NR%2) ? a[(NR+1)/2] : (a[NR/2]+a[NR/2+1])/2}'; }

echo "httparse request stream, $runs executions per run, $seeds engine seeds, $files corpus files"
printf '%-44s %8s   %s\n' "arm" "median" "cov per seed"
declare -A med
for a in a b c d; do
    case $a in
        a) name="a plain engine, empty corpus"; b=httparse_stream; src="" ;;
        b) name="b seeded with the training requests"; b=httparse_stream; src="$work/training" ;;
        c) name="c seeded with tracewalk seed"; b=httparse_stream; src="$work/seeds" ;;
        d) name="d tracewalk seed + model mutator"; b=httparse_modeled; src="$work/seeds" ;;
    esac
    covs=()
    for s in $(seq 1 "$seeds"); do covs+=("$(arm "$b" "$src" "$s")"); done
    med[$a]=$(printf '%s\n' "${covs[@]}" | median)
    printf '%-44s %8s   %s\n' "$name" "${med[$a]}" "${covs[*]}"
done
awk -v a="${med[a]}" -v b="${med[b]}" -v c="${med[c]}" -v d="${med[d]}" 'BEGIN {
    printf "ratios: c/b %.2f  d/b %.2f  c/a %.2f  d/a %.2f   (goal: c, d >= 1.2x b and >= 2x a)\n", c/b, d/b, c/a, d/a }'
