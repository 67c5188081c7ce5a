#!/usr/bin/env bash
# The measured trade-off between plausibility and rarity: for one model, N traces per
# generation mode with one seed, the batch report of `tracewalk gen --report`, as a Markdown
# table. Tour mode makes as many traces as it needs.
#
# Usage: benches/rare_tradeoff.sh MODEL [N] [SEED]
# The binary is target/release/tracewalk unless TRACEWALK names another.
set -euo pipefail
model=${1:?usage: benches/rare_tradeoff.sh MODEL [N] [SEED]}
n=${2:-200}
seed=${3:-1}
bin=${TRACEWALK:-target/release/tracewalk}

echo "| mode | traces | messages | well-formed | new templates | transitions covered | mean surprise | max surprise |"
echo "|---|---:|---:|---:|---:|---:|---:|---:|"
for mode in plausible rare novel frontier tour; do
    "$bin" gen "$model" --mode "$mode" -n "$n" --seed "$seed" --report 2>&1 >/dev/null |
        awk -v mode="$mode" '
            /^batch/         { traces = $2; messages = $4 }
            /^well-formed/   { wf = $2 }
            /^new templates/ { nt = $3 }
            /^transitions/   { cov = $2 "/" $4 " " substr($7, 2, length($7) - 2) }
            /^surprise/      { mean = $3; max = $6 }
            END { printf "| %s | %s | %s | %s | %s | %s | %s bits | %s bits |\n", mode, traces, messages, wf, nt, cov, mean, max }'
done
