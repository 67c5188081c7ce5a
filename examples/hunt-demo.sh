#!/bin/sh
# The tracewalk demo: learn two bundled corpora, hunt the two demo targets of examples/ with
# rare traffic, and print every finding with its shrunk, replayable trace.
#
#   examples/hunt-demo.sh            (from the repository root; about a minute on 2 cores
#                                     once tracewalk is built)
#
# lamp_hub reads a session on stdin (one process per trace); shop_server is a loopback HTTP
# server that tracewalk starts, watches and restarts after each crash. Each has three planted
# bugs (see the comments at the top of examples/lamp_hub.rs and examples/shop_server.rs).
# Everything goes to $CARGO_TARGET_DIR/hunt-demo (default target/hunt-demo); each run starts
# the campaigns afresh. Exit status 0 when both hunts ran (whatever they found).
set -eu
cd "$(dirname "$0")/.."
target=${CARGO_TARGET_DIR:-target}
out=$target/hunt-demo
# Below Linux's ephemeral range (32768–60999), so no client socket can hold it.
port=${HUNT_DEMO_PORT:-21400}

cargo build --release --quiet
tw=$target/release/tracewalk
mkdir -p "$out"
rustc --edition 2024 -O examples/lamp_hub.rs -o "$out/lamp_hub"
rustc --edition 2024 -O examples/shop_server.rs -o "$out/shop_server"
"$tw" learn corpora/lamp-control -o "$out/lamp.model" --quiet
"$tw" learn corpora/shop-api -o "$out/shop.model" --quiet
rm -rf "$out/lamp-hunt" "$out/shop-hunt"

# hunt exits 1 when it found something: that is the point here. A Rust backtrace makes each
# crash of a demo target take a tenth of a second; the panic location is all tracewalk needs.
hunt() { "$tw" hunt "$@" --env RUST_BACKTRACE=0 || [ $? -eq 1 ]; }

echo "== lamp_hub (line protocol on stdin), rare traffic, 10000 runs"
hunt "$out/lamp.model" --exec "$out/lamp_hub" --mode rare --budget 10000 --seed 1 --jobs 2 \
    -o "$out/lamp-hunt"
echo
echo "== shop_server (HTTP on 127.0.0.1:$port), rare traffic, 3000 runs"
hunt "$out/shop.model" --tcp "127.0.0.1:$port" --spawn "$out/shop_server --port {port}" \
    --mode rare --budget 3000 --seed 1 --jobs 2 -o "$out/shop-hunt"
