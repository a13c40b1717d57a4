#!/usr/bin/env python3
"""Load a reduced tree written by `pollard reduce --out TREE.json`, rebuild its conductance
matrix, and check it against the numbers the file itself reports.

    python3 examples/check_reduced_tree.py TREE.json

Checks (exit status 1 if any fails):
  1. strict binary tree: every compartment has 0 or 2 children, parents listed first;
     every axial and leak conductance finite and > 0;
  2. soma input resistance from a dense solve of G v = e_soma equals the report's reduced value
     (and the full cell's within the junction effect plus 1e-6);
  3. the feed-forward form: for random injected currents I, the soma voltage of the dense solve
     equals (sum_k I_k * prod of w along k's path to the root) / Y_root;
  4. the slowest time constant (smallest eigenvalue of C^-1 G) equals tau = Rm*Cm (uniform
     capacitances), lies within 5 % of it (fitted: held within 2 % by the fit, up to 4.5 %
     measured) or within 12 % (timed, the default: held within ~10 %, 18.2-22.2 ms measured
     for 20 ms on the real cells);
  5. every site's reduced DC log attenuation to the soma, its input at one compartment or at a
     point on the link between two adjacent ones (fraction w of the link's resistance from its
     compartment): the point added to G as a node of its own (the link's g cut into g/w and
     g/(1 - w)), ln(V_point / V_soma) for a current at the point, from a dense solve, equals
     the file's.

Needs numpy only. Units in the file: nS, pF, um; 1/nS = 1 GOhm = 1000 MOhm; nS/pF = 1/ms.
"""

import json
import sys

import numpy as np


def fail(msg):
    print("FAIL:", msg)
    return 1


def main(path):
    with open(path) as f:
        doc = json.load(f)
    if doc.get("format") != "pollard.reduced-tree" or doc.get("schema_version") != 5:
        print("not a version-5 pollard reduced tree:", path)
        return 1
    comps = doc["compartments"]
    n = len(comps)
    errors = 0

    # 1. structure and signs
    for c in comps:
        k = c["id"]
        if c["parent"] is None:
            if k != 0:
                errors += fail(f"compartment {k} has no parent but is not the root")
        else:
            if not c["parent"] < k:
                errors += fail(f"compartment {k}: parent {c['parent']} is not listed first")
            if not (np.isfinite(c["g_axial_ns"]) and c["g_axial_ns"] > 0):
                errors += fail(f"compartment {k}: g_axial_ns = {c['g_axial_ns']}")
        if len(c["children"]) not in (0, 2):
            errors += fail(f"compartment {k} has {len(c['children'])} children")
        for ch in c["children"]:
            if comps[ch]["parent"] != k:
                errors += fail(f"compartment {k} lists child {ch} whose parent differs")
        if not (np.isfinite(c["g_leak_ns"]) and c["g_leak_ns"] > 0):
            errors += fail(f"compartment {k}: g_leak_ns = {c['g_leak_ns']}")

    # conductance matrix (nS), and its factor M with G = M^T M: one row sqrt(g)(e_k - e_parent)
    # per link, one row sqrt(G_leak) e_k per leak. Junction links can be 1e10 times stiffer than
    # leaks, which a diagonal entry g + G_leak rounds away; solving through the QR factors of M
    # (G = R^T R) and taking singular values of M keeps them (error ~ eps*sqrt(cond) instead of
    # eps*cond).
    G = np.zeros((n, n))
    M = np.zeros((2 * n - 1, n))
    row = 0
    for c in comps:
        k = c["id"]
        G[k, k] += c["g_leak_ns"]
        if c["parent"] is not None:
            p, g = c["parent"], c["g_axial_ns"]
            G[k, k] += g
            G[p, p] += g
            G[k, p] -= g
            G[p, k] -= g
            M[row, k], M[row, p] = np.sqrt(g), -np.sqrt(g)
            row += 1
        M[row, k] = np.sqrt(c["g_leak_ns"])
        row += 1
    R = np.linalg.qr(M, mode="r")

    def solve(b):
        y = np.linalg.solve(R.T, b)  # triangular systems, solved densely (numpy only)
        return np.linalg.solve(R, y)

    # the assembled matrix is the factor's Gram matrix
    if not np.allclose(M.T @ M, G, rtol=1e-12, atol=1e-12 * np.abs(G).max()):
        errors += fail("internal: M^T M differs from G")

    # 2. soma input resistance
    e0 = np.zeros(n)
    e0[0] = 1.0
    r_mohm = solve(e0)[0] * 1000.0
    rep = doc["report"]
    r_rep = rep["soma_input_resistance_dc_reduced_mohm"]
    r_full = rep["soma_input_resistance_dc_full_mohm"]
    rel = abs(r_mohm - r_rep) / r_rep
    rel_full = abs(r_mohm - r_full) / r_full
    print(f"soma input resistance: solve {r_mohm:.9g} MOhm, reported {r_rep:.9g} (rel {rel:.2e}), "
          f"full cell {r_full:.9g} (rel {rel_full:.2e})")
    if rel > 1e-6:
        errors += fail("soma input resistance differs from the reported reduced value")
    if rel_full > abs(rep["junction_effect_relative"]) + 1e-6:
        errors += fail("soma input resistance differs from the full cell's")

    # 3. feed-forward form
    ff = doc["feed_forward"]
    w = ff["current_ratio_to_parent"]
    y_root = ff["root_input_conductance_ns"]
    if abs(1000.0 / y_root - r_mohm) / r_mohm > 1e-6:
        errors += fail("root input conductance does not match the solve")
    prod = np.ones(n)
    for c in comps[1:]:
        k = c["id"]
        if not (0.0 < w[k] < 1.0):
            errors += fail(f"w[{k}] = {w[k]} is outside (0, 1)")
        prod[k] = prod[c["parent"]] * w[k]
    rng = np.random.default_rng(1)
    worst = 0.0
    for _ in range(5):
        i_pa = rng.uniform(-0.5, 1.5, n)
        v_solve = solve(i_pa)[0]
        v_ff = np.dot(i_pa, prod) / y_root
        worst = max(worst, abs(v_ff - v_solve) / (np.abs(i_pa).sum() / y_root))
    print(f"feed-forward form vs solve: worst relative difference {worst:.2e}")
    if worst > 1e-6:
        errors += fail("feed-forward form differs from the solve")
    layers = ff["compartments_by_depth"]
    if sorted(k for layer in layers for k in layer) != list(range(n)):
        errors += fail("layers do not cover every compartment once")
    for d, layer in enumerate(layers):
        for k in layer:
            if comps[k]["depth"] != d:
                errors += fail(f"compartment {k} is in layer {d} but has depth {comps[k]['depth']}")

    # 4. slowest time constant: smallest eigenvalue of C^-1/2 G C^-1/2 (1/ms), the smallest
    # squared singular value of M C^-1/2
    s = 1.0 / np.sqrt(np.array([c["capacitance_pf"] for c in comps]))
    sv = np.linalg.svd(M * s[None, :], compute_uv=False)
    tau = doc["parameters"]["tau_ms"]
    tau_slow = 1.0 / sv.min() ** 2
    rel_tau = abs(tau_slow - tau) / tau
    print(f"slowest time constant {tau_slow:.9g} ms, tau = {tau} ms (rel {rel_tau:.2e})")
    # uniform capacitances (C = tau x leak) keep tau exactly; fitted ones are held within 2 %
    # of it, timed ones (the default) within 12 % (README, "How the reduction works")
    rule = doc["parameters"].get("capacitance", "uniform")
    if rule == "uniform" and rel_tau > 1e-6:
        errors += fail("the slowest time constant is not tau")
    elif rule == "fitted" and rel_tau > 0.0201:
        errors += fail("the slowest time constant is more than 2 % from tau")
    elif rule == "timed" and rel_tau > 0.12:
        errors += fail("the slowest time constant is more than 12 % from tau")
    reported = doc["report"].get("slowest_time_constant_ms")
    if reported is not None and abs(reported - tau_slow) > 1e-6 * tau_slow:
        errors += fail(f"the report's slowest time constant {reported} ms is not {tau_slow} ms")

    # site map: counts add up
    counted = sum(c["site_count"] for c in comps)
    if counted != len(doc["site_map"]):
        errors += fail("site counts do not add up to the number of sites")

    # 5. sites' DC attenuation to the soma, inputs on links included
    def on_link(c, k, w):
        """Voltages for a unit current at a point x on the link c-k (fraction w of its
        resistance from c): x is node n of a network whose link c-k is cut into c-x (g/w) and
        x-k (g/(1 - w)), solved through the QR factor of its incidence form, as above."""
        child = k if comps[k]["parent"] == c else c
        mx = np.zeros((2 * n + 1, n + 1))
        r = 0
        for cc in comps:
            j = cc["id"]
            if cc["parent"] is not None and j != child:
                g = cc["g_axial_ns"]
                mx[r, j], mx[r, cc["parent"]] = np.sqrt(g), -np.sqrt(g)
                r += 1
            mx[r, j] = np.sqrt(cc["g_leak_ns"])
            r += 1
        g = comps[child]["g_axial_ns"]
        mx[r, c], mx[r, n] = np.sqrt(g / w), -np.sqrt(g / w)
        mx[r + 1, k], mx[r + 1, n] = np.sqrt(g / (1.0 - w)), -np.sqrt(g / (1.0 - w))
        rx = np.linalg.qr(mx, mode="r")
        return np.linalg.solve(rx, np.linalg.solve(rx.T, np.eye(n + 1)[:, n]))

    worst = 0.0
    seen = {}
    for site in doc["site_map"]:
        c, split = site["compartment"], site.get("split")
        if not split:
            v = solve(np.eye(n)[:, c])
            ln_a = np.log(v[c] / v[0])
        else:
            k, w = split["compartment"], split["weight"]
            if comps[k]["parent"] != c and comps[c]["parent"] != k:
                errors += fail(f"site {site['swc_id']}: split between compartments not adjacent")
                continue
            if (c, k, w) not in seen:
                v = on_link(c, k, w)
                seen[(c, k, w)] = np.log(v[n] / v[0])
            ln_a = seen[(c, k, w)]
        worst = max(worst, abs(ln_a - site["attenuation_to_soma_reduced_np"]))
    if worst > 1e-6:
        errors += fail(f"site attenuations to the soma differ from the file's by up to {worst:.2e} Np")

    print("OK" if errors == 0 else f"{errors} check(s) failed")
    return 0 if errors == 0 else 1


if __name__ == "__main__":
    if len(sys.argv) != 2:
        print(__doc__)
        sys.exit(2)
    sys.exit(main(sys.argv[1]))
