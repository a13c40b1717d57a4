#!/bin/sh
# End-to-end timing of `pollard cable CELL.swc --json` against the numpy/scipy peer
# (benches/peer_cable.py: numpy reads the file, scipy's sparse LU factors the tree's conductance
# matrix and solves for the soma column alone; it writes nothing).
#
# Usage (from the repository root): sh benches/peer_cable.sh [CELL.swc]
# Without a file, the benchmark's 1,000,000-point cell (synth::big_cell(1_000_000, 1)) is written
# to $TMPDIR/pollard_big1m.swc first. Needs: python3 with numpy and scipy
# (python3 -m pip install numpy scipy). Medians of whole processes (5 runs of pollard, 3 of the
# peer), wall-clock and CPU time (user + system, all threads; on a shared machine CPU time is the
# steadier of the two), the file read once beforehand so both start from a warm page cache.
set -eu
cd "$(dirname "$0")/.."
CELL=${1:-${TMPDIR:-/tmp}/pollard_big1m.swc}
cargo build --release --no-default-features --quiet
if [ ! -f "$CELL" ]; then
    POLLARD_WRITE_CELL="$CELL" cargo bench --no-default-features --quiet --bench cable
fi
cat "$CELL" > /dev/null
python3 - "$CELL" <<'PY'
import os, resource, statistics, subprocess, sys, time
cell = sys.argv[1]
def run(cmd, runs):
    wall, cpu = [], []
    for _ in range(runs):
        r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        t = time.perf_counter()
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
        wall.append(time.perf_counter() - t)
        r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpu.append(r1.ru_utime - r0.ru_utime + r1.ru_stime - r0.ru_stime)
    return statistics.median(wall), statistics.median(cpu), wall
print("load average before: %.1f %.1f %.1f" % os.getloadavg())
ours = run(["target/release/pollard", "cable", cell, "--json"], 5)
peer = run([sys.executable, "benches/peer_cable.py", cell], 3)
print("load average after:  %.1f %.1f %.1f" % os.getloadavg())
print("pollard cable --json (every point: Z_kk, Z_ks, both attenuations; JSON to /dev/null):")
print("  median wall %.3f s, median CPU %.3f s  (wall runs %s)"
      % (ours[0], ours[1], ", ".join("%.3f" % t for t in ours[2])))
print("numpy read + scipy sparse LU, soma column only (whole process, imports included):")
print("  median wall %.3f s, median CPU %.3f s  (wall runs %s)"
      % (peer[0], peer[1], ", ".join("%.3f" % t for t in peer[2])))
print("ratio peer / pollard: wall %.1f, CPU %.1f (goal >= 5)" % (peer[0] / ours[0], peer[1] / ours[1]))
PY
