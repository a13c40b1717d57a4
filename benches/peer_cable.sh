#!/bin/sh
# End-to-end timing of `pollard cable CELL.swc --json` against the numpy/scipy peer
# (benches/peer_cable.py: numpy reads the file, scipy's sparse LU factors the tree's conductance
# matrix and solves for the soma column alone; it writes nothing).
#
# Usage (from the repository root): sh benches/peer_cable.sh [CELL.swc]
# Without a file, the benchmark's 1,000,000-point cell (synth::big_cell(1_000_000, 1)) is written
# to $TMPDIR/pollard_big1m.swc first. Needs: python3 with numpy and scipy
# (python3 -m pip install numpy scipy). Wall-clock medians of whole processes (5 runs of pollard,
# 3 of the peer), the file read once beforehand so both start from a warm page cache.
set -eu
cd "$(dirname "$0")/.."
CELL=${1:-${TMPDIR:-/tmp}/pollard_big1m.swc}
cargo build --release --no-default-features --quiet
if [ ! -f "$CELL" ]; then
    POLLARD_WRITE_CELL="$CELL" cargo bench --no-default-features --quiet --bench cable
fi
cat "$CELL" > /dev/null
python3 - "$CELL" <<'PY'
import statistics, subprocess, sys, time
cell = sys.argv[1]
def wall(cmd, runs):
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
        times.append(time.perf_counter() - t)
    return statistics.median(times), times
ours, ours_all = wall(["target/release/pollard", "cable", cell, "--json"], 5)
peer, peer_all = wall([sys.executable, "benches/peer_cable.py", cell], 3)
print("pollard cable --json (all points, Z_kk, Z_ks, both attenuations, JSON to /dev/null):")
print("  median %.3f s  runs %s" % (ours, ", ".join("%.3f" % t for t in ours_all)))
print("numpy read + scipy sparse LU, soma column only:")
print("  median %.3f s  runs %s" % (peer, ", ".join("%.3f" % t for t in peer_all)))
print("ratio peer / pollard = %.1f (goal >= 5)" % (peer / ours))
PY
