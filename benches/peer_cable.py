#!/usr/bin/env python3
"""Peer pipeline for the `pollard cable` end-to-end timing (a general-purpose route doing LESS work).

Reads an SWC file with numpy, assembles the DC nodal conductance matrix of the tree (one node per
point; each segment's axial conductance pi*r1*r2/(Ra*h) between child and parent and half its
membrane conductance area/Rm at each end, the lumped soma as one sphere; standard compartmental
discretisation, Koch 1999 ch. 3), factors it with scipy's sparse LU (SuperLU) and solves for the
soma column alone (Z_ks for every k). pollard computes Z_kk, Z_ks and both attenuations at every
point and writes them all as JSON; this script computes one column and writes nothing.

Usage: python3 benches/peer_cable.py CELL.swc   -> prints seconds (read, build, factor+solve, total)
It generates nothing itself; benches/peer_cable.sh makes the cell and times both.
"""
import sys
import time

t_start = time.perf_counter()
import numpy as np  # noqa: E402
import scipy.sparse as sp  # noqa: E402
import scipy.sparse.linalg as spla  # noqa: E402

RM, RA = 20000.0, 150.0  # ohm cm^2, ohm cm (pollard's defaults)
UM = 1e-4  # cm


def main(path):
    t0 = time.perf_counter()
    a = np.loadtxt(path, comments="#", dtype=np.float64)
    t1 = time.perf_counter()
    ids = a[:, 0].astype(np.int64)
    kind = a[:, 1].astype(np.int64)
    xyz = a[:, 2:5]
    r = a[:, 5]
    par_id = a[:, 6].astype(np.int64)
    n = len(ids)
    order = np.argsort(ids)
    sorted_ids = ids[order]
    has_parent = par_id >= 0
    child = np.nonzero(has_parent)[0]
    parent = order[np.searchsorted(sorted_ids, par_id[child])]
    soma = kind == 1
    # soma points are one node: map every soma point to the first soma point
    node = np.arange(n)
    soma_idx = np.nonzero(soma)[0]
    s0 = soma_idx[0] if len(soma_idx) else 0
    node[soma] = s0
    # segments that are not soma-soma links
    keep = ~(soma[child] & soma[parent])
    c, p = child[keep], parent[keep]
    h = np.linalg.norm(xyz[c] - xyz[p], axis=1)
    h = np.maximum(h, 1e-4)
    rc = r[c]
    rp = np.where(soma[p], rc, r[p])  # a stem is a cylinder of its own radius
    g_ax = np.pi * rc * rp * UM * UM / (RA * h * UM)
    area = np.pi * (rc + rp) * np.hypot(h, rc - rp) * UM * UM
    g_m = area / RM
    nc, npn = node[c], node[p]
    diag = np.zeros(n)
    np.add.at(diag, nc, g_ax + 0.5 * g_m)
    np.add.at(diag, npn, g_ax + 0.5 * g_m)
    if len(soma_idx):
        diag[s0] += 4.0 * np.pi * (r[soma_idx].max() * UM) ** 2 / RM
    # unused soma points (merged into s0) get a unit diagonal so the matrix stays regular
    lone = np.zeros(n, dtype=bool)
    lone[soma_idx] = True
    lone[s0] = False
    diag[lone] = 1.0
    rows = np.concatenate([np.arange(n), nc, npn])
    cols = np.concatenate([np.arange(n), npn, nc])
    vals = np.concatenate([diag, -g_ax, -g_ax])
    g = sp.csc_matrix((vals, (rows, cols)), shape=(n, n))
    t2 = time.perf_counter()
    lu = spla.splu(g)
    e = np.zeros(n)
    e[s0] = 1.0
    z = lu.solve(e)
    t3 = time.perf_counter()
    print(f"points {n}")
    print(f"soma input resistance {z[s0] / 1e6:.3f} MOhm")
    print(f"read {t1 - t0:.3f} s, build {t2 - t1:.3f} s, factor+solve {t3 - t2:.3f} s")
    print(f"total {t3 - t0:.3f} s (with imports {t3 - t_start:.3f} s)")


if __name__ == "__main__":
    main(sys.argv[1])
