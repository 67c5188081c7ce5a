#!/usr/bin/env bash
# The value-flow hunting figure of README ("Value flow" → "Figures"): runs until `tracewalk
# hunt` first finds the planted bug of the ticket desk (examples/ticket_desk.rs), per seed, with
# value flow on and the desk's replies fed back (--per-message), with value flow on but the
# whole session sent at once (no replies to hear), and with --no-flow; medians side by side.
# Every hunt runs the full budget (there is no stop-at-first-finding); a seed that does not
# find the bug counts as more than the budget.
#
# Usage: benches/flow_hunt.sh [BUDGET] [SEEDS...]     (defaults: 2000 and seeds 1 to 7)
# Builds release tracewalk first; TRACEWALK names another binary. About a minute on 2 cores.
set -euo pipefail
cd "$(dirname "$0")/.."
budget=${1:-2000}
shift || true
seeds=("$@")
[ ${#seeds[@]} -gt 0 ] || seeds=(1 2 3 4 5 6 7)
if [ -z "${TRACEWALK:-}" ]; then
    cargo build --release -q
    TRACEWALK="${CARGO_TARGET_DIR:-target}/release/tracewalk"
fi
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
rustc --edition 2024 -O -o "$tmp/ticket_desk" examples/ticket_desk.rs
"$TRACEWALK" learn corpora/ticket-desk -o "$tmp/desk.model" -q

# Runs to the first finding of the planted crash, or "-" when the budget ran out.
first_run() {
    python3 -c '
import json, sys
s = json.load(sys.stdin)
runs = [f["first_run"] for f in s["findings"] if "ticket_desk.rs" in f["signature"]]
print(min(runs) if runs else "-")'
}

declare -A found
for variant in live whole off; do
    for seed in "${seeds[@]}"; do
        case $variant in
            live) target=(--per-message); flow=() ;;
            whole) target=(); flow=() ;;
            off) target=(--per-message); flow=(--no-flow) ;;
        esac
        dir="$tmp/$variant-$seed"
        # The desk issues ids from its own seed, the same for every session of a hunt, so
        # a finding replays; a different desk seed per hunt seed. It answers every command at
        # once: the long reply timeout only keeps a loaded machine from dropping a reply.
        found[$variant,$seed]=$("$TRACEWALK" hunt "$tmp/desk.model" --exec "$tmp/ticket_desk" \
            "${target[@]}" "${flow[@]}" --reply-end '^(OK|ERR|VAL ticket=[0-9]+ state)' \
            --env "TICKET_DESK_SEED=$seed" --env RUST_BACKTRACE=0 --reply-timeout 2s --seed "$seed" \
            --budget "$budget" --no-shrink --json -o "$dir" 2>/dev/null | first_run || true)
    done
done

median() {
    python3 -c '
import sys
budget = int(sys.argv[1])
runs = sorted(int(r) if r != "-" else budget + 1 for r in sys.argv[2:])
m = runs[len(runs) // 2]
print(f"> {budget}" if m > budget else m)' "$budget" "$@"
}

echo "runs until tracewalk hunt finds the ticket desk's planted bug (plausible mode, budget $budget runs, seeds ${seeds[*]})"
echo
echo "| | median runs | per seed |"
echo "|---|---:|---|"
for variant in live whole off; do
    case $variant in
        live) name='flow on, replies fed back (`--per-message`)' ;;
        whole) name='flow on, session sent whole (`--exec` alone)' ;;
        off) name='`--no-flow` (`--per-message`)' ;;
    esac
    runs=()
    for seed in "${seeds[@]}"; do runs+=("${found[$variant,$seed]}"); done
    echo "| $name | $(median "${runs[@]}") | ${runs[*]} |"
done
