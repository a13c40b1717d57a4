#!/usr/bin/env python3
"""Independent reader of the NeuroML cells written by `pollard reduce --neuroml`.

    python3 tests/neuroml_reader.py CELL.cell.nml TREE.json

Rebuilds every compartment's conductances from the NeuroML file alone, with the convention the
README states ("NeuroML"): each segment is a cylinder of length L = |distal - proximal| and
diameter d; membrane area A = pi d L; leak = A * condDensity and capacitance = A *
specificCapacitance of the segment's group; the axial conductance between the parent's node and
the segment's node (its distal end) is pi d^2 / (4 rho L), rho the resistivity of its group.
Then checks, against the tree JSON written by the same run (`--out`):
  1. the same strict binary tree (segment k's parent = compartment k's parent);
  2. every axial conductance, leak and capacitance within 1e-9 (relative);
  3. the soma DC input resistance from the NeuroML conductances within 1e-9 of the report's.
The input resistance is 1/Y_0 with Y_k = G_k + sum over children c of g_c Y_c / (g_c + Y_c)
(the subtree admittance of a passive tree, Rall 1959; written here from memory). For small
trees it is also checked against a dense numpy solve of the conductance matrix.
Exit status 1 on any failure. Needs numpy only.
"""

import json
import sys
import xml.etree.ElementTree as ET

import numpy as np

NS = {"n": "http://www.neuroml.org/schema/neuroml2"}
UNITS = {  # to S/cm2, uF/cm2, ohm cm, mV
    "S_per_cm2": 1.0, "mS_per_cm2": 1e-3, "S_per_m2": 1e-4,
    "uF_per_cm2": 1.0, "F_per_m2": 100.0,
    "ohm_cm": 1.0, "kohm_cm": 1e3, "ohm_m": 100.0,
    "mV": 1.0, "V": 1e3,
}


def quantity(text):
    text = text.strip()
    for unit in sorted(UNITS, key=len, reverse=True):
        if text.endswith(unit):
            return float(text[: -len(unit)]) * UNITS[unit]
    raise ValueError(f"unknown unit in {text!r}")


def read_cell(path):
    """Per segment (indexed by id): parent, g_axial (nS), leak (nS), capacitance (pF)."""
    root = ET.parse(path).getroot()
    cell = root.find("n:cell", NS)
    morph = cell.find("n:morphology", NS)
    segs = {}
    for s in morph.findall("n:segment", NS):
        sid = int(s.get("id"))
        par = s.find("n:parent", NS)
        prox = s.find("n:proximal", NS)
        dist = s.find("n:distal", NS)
        p = np.array([float(prox.get(a)) for a in "xyz"])
        q = np.array([float(dist.get(a)) for a in "xyz"])
        d = float(dist.get("diameter"))
        if float(prox.get("diameter")) != d:
            raise ValueError(f"segment {sid} is not a cylinder")
        segs[sid] = dict(parent=None if par is None else int(par.get("segment")),
                         length_um=float(np.sqrt(np.sum((q - p) ** 2))), d_um=d)
    # segment groups: members and includes (resolved one level at a time)
    groups = {}
    for g in morph.findall("n:segmentGroup", NS):
        groups[g.get("id")] = ([int(m.get("segment")) for m in g.findall("n:member", NS)],
                               [i.get("segmentGroup") for i in g.findall("n:include", NS)])

    def members(name, seen=()):
        mem, inc = groups[name]
        out = set(mem)
        for i in inc:
            if i not in seen:
                out |= members(i, seen + (name,))
        return out

    bio = cell.find("n:biophysicalProperties", NS)
    mp = bio.find("n:membraneProperties", NS)
    ip = bio.find("n:intracellularProperties", NS)

    def per_segment(elems, attr):
        val = {}
        for e in elems:
            for k in members(e.get("segmentGroup", "all")):
                if k in val:
                    raise ValueError(f"segment {k} has two values of {attr}")
                val[k] = quantity(e.get(attr))
        return val

    dens = per_segment(mp.findall("n:channelDensity", NS), "condDensity")
    cm = per_segment(mp.findall("n:specificCapacitance", NS), "value")
    rho = per_segment(ip.findall("n:resistivity", NS), "value")
    n = len(segs)
    if sorted(segs) != list(range(n)):
        raise ValueError("segment ids are not 0..n-1")
    parent = [segs[k]["parent"] for k in range(n)]
    g_ax = np.zeros(n)
    leak = np.zeros(n)
    cap = np.zeros(n)
    for k in range(n):
        L = segs[k]["length_um"] * 1e-4  # cm
        d = segs[k]["d_um"] * 1e-4
        area = np.pi * d * L  # cm2
        leak[k] = area * dens[k] * 1e9  # nS
        cap[k] = area * cm[k] * 1e-6 * 1e12  # pF
        if parent[k] is not None:
            g_ax[k] = np.pi * d * d / (4.0 * rho[k] * L) * 1e9  # nS
    return parent, [float(v) for v in g_ax], [float(v) for v in leak], [float(v) for v in cap]


def input_resistance_mohm(parent, g, leak):
    """1/Y_0 by the subtree admittance recursion, children before parents (ids parents-first)."""
    y = np.array(leak, dtype=float)
    for k in range(len(parent) - 1, 0, -1):
        y[parent[k]] += g[k] * y[k] / (g[k] + y[k])
    return float(1e3 / y[0])  # 1/nS = 1000 MOhm


def dense_input_resistance_mohm(parent, g, leak):
    n = len(parent)
    a = np.diag(np.array(leak, dtype=float))
    for k in range(1, n):
        p = parent[k]
        a[k, k] += g[k]
        a[p, p] += g[k]
        a[k, p] -= g[k]
        a[p, k] -= g[k]
    e = np.zeros(n)
    e[0] = 1.0
    return np.linalg.solve(a, e)[0] * 1e3


def rel(a, b):
    return abs(a - b) / max(abs(a), abs(b))


def check(nml_path, json_path, tol=1e-9):
    """Returns a list of failures (empty when everything matches)."""
    with open(json_path) as f:
        doc = json.load(f)
    comps = doc["compartments"]
    parent, g, leak, cap = read_cell(nml_path)
    fails = []
    if len(parent) != len(comps):
        return [f"{len(parent)} segments for {len(comps)} compartments"]
    for c in comps:
        k = c["id"]
        if parent[k] != c["parent"]:
            fails.append(f"segment {k}: parent {parent[k]}, compartment's {c['parent']}")
        for name, mine, theirs in (("g_axial_ns", g[k], c["g_axial_ns"]),
                                   ("g_leak_ns", leak[k], c["g_leak_ns"]),
                                   ("capacitance_pf", cap[k], c["capacitance_pf"])):
            if theirs == 0.0 and mine == 0.0:
                continue
            if not rel(mine, theirs) <= tol:
                fails.append(f"segment {k}: {name} {mine!r} vs {theirs!r}")
    rin = input_resistance_mohm(parent, g, leak)
    want = doc["report"]["soma_input_resistance_dc_reduced_mohm"]
    if not rel(rin, want) <= tol:
        fails.append(f"soma input resistance {rin!r} MOhm vs the report's {want!r}")
    if len(parent) <= 200:
        dense = dense_input_resistance_mohm(parent, g, leak)
        if not rel(dense, rin) <= 1e-6:  # the dense solve loses digits to stiff junction links
            fails.append(f"dense solve gives {dense!r} MOhm, recursion {rin!r}")
    return fails


if __name__ == "__main__":
    if len(sys.argv) != 3:
        print(__doc__)
        sys.exit(2)
    problems = check(sys.argv[1], sys.argv[2])
    for p in problems:
        print("FAIL:", p)
    sys.exit(1 if problems else 0)
