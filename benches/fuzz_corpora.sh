# Corpora for the fuzzing benches (sourced by fuzz_coverage.sh and fuzz_demo.sh, from the
# repository root).

# training_corpus DIR CORPUS: arm b, the corpus's training sessions as a client sends them,
# one file per session.
training_corpus() {
    mkdir -p "$1"
    python3 benches/training_requests.py "$1" "corpora/$2/sessions" "$2"
}

# seed_corpus TRACEWALK MODEL DIR FILES: arms c and d, exactly FILES `tracewalk seed` files
# (identical traces collapse into one file, so ask for more until there are enough; the
# surplus is dropped in name order). SEED_MODE chooses the mode (default plausible).
seed_corpus() {
    local tw="$1" model="$2" dir="$3" files="$4" n="$4" have
    while :; do
        rm -rf "$dir"
        "$tw" seed "$model" -n "$n" -o "$dir" --mode "${SEED_MODE:-plausible}" 2>/dev/null
        have=$(ls "$dir" | wc -l)
        [ "$have" -ge "$files" ] && break
        n=$((n + files - have))
    done
    ls "$dir" | sort | tail -n +$((files + 1)) | while read -r f; do rm "$dir/$f"; done
}
