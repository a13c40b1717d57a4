#!/bin/bash
# Hashes of the fitted trees of every cell in CELLS_DIR at 3-255 compartments, one line per
# (cell, budget): run it with the CLI built before and after a change that should not change any
# tree (a speed-up), and diff the two outputs.
#
# usage: examples/fitted_tree_hashes.sh CELLS_DIR [POLLARD_BINARY] > hashes.txt
# (build first: cargo build --release --no-default-features --bin pollard)
set -euo pipefail
cells=${1:?usage: fitted_tree_hashes.sh CELLS_DIR [POLLARD_BINARY]}
exe=${2:-target/release/pollard}
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
for f in "$cells"/*.swc; do
    c=$(basename "$f" .swc)
    # the flags a cell needs (units, missing radii), as in examples/fidelity_table.rs
    case $c in
        drosophila_pn_fafb) fl=(--scale 0.001 --default-diameter 0.5) ;;
        drosophila_pn_hemibrain) fl=(--scale 0.001) ;;
        retina_rgc) fl=(--default-diameter 0.5) ;;
        *) fl=() ;;
    esac
    for b in 3 15 31 63 127 255; do
        if "$exe" reduce "$f" -n "$b" --capacitance fitted --no-fidelity "${fl[@]}" \
            -o "$tmp/tree.json" > /dev/null 2>&1; then
            echo "$c $b $(md5sum < "$tmp/tree.json" | cut -c1-16)"
        else
            echo "$c $b failed"
        fi
    done
done
