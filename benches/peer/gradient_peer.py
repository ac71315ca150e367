"""The peer of benches/io.sh: the gradient method (Todini & Pilati, 1988) scripted in Python with
scipy's sparse matrices and CHOLMOD (through scikit-sparse) for the Cholesky factorization.

It reads a model written by `ringmain generate` (JSON: junctions, reservoirs, tanks at their
level, open Hazen-Williams pipes with minor losses), solves the snapshot and writes heads,
pressures and flows as JSON: the same whole job as `ringmain solve MODEL --format json --output
OUT`, written the way an engineer would script it with the standard scientific Python stack
(vectorized numpy, one symbolic analysis reused by every factorization).

    python gradient_peer.py MODEL.json OUT.json

Nothing here is used by the tests; it exists to be timed beside ringmain in the same run.
Results are only as good as the model and its data; designs must be checked by a licensed
engineer against local codes and the utility's standards.
"""

import json
import sys

import numpy as np
import scipy.sparse as sp
from sksparse.cholmod import cholesky

# Hazen-Williams in its SI velocity form V = 0.849 C R^0.63 S^0.54 (common practice; R = D/4 the
# hydraulic radius of a full pipe), solved for the slope: S = (Q / (0.849 C (pi/4) D^2 (D/4)^0.63))^(1/0.54).
HW_EXPONENT = 1.0 / 0.54
G = 9.80665  # standard gravity, m/s2 (CGPM 1901)


def main(model_path, out_path):
    with open(model_path) as f:
        model = json.load(f)
    nodes = model["nodes"]
    links = model["links"]
    ids = [n["id"] for n in nodes]
    index = {i: k for k, i in enumerate(ids)}
    n_nodes = len(nodes)
    fixed = np.zeros(n_nodes, dtype=bool)
    head0 = np.zeros(n_nodes)
    elevation = np.array([float(n.get("elevation", 0.0)) for n in nodes])
    demand = np.zeros(n_nodes)
    for k, n in enumerate(nodes):
        kind = n.get("kind", "junction")
        if kind == "reservoir":
            fixed[k] = True
            head0[k] = float(n["head"])
            elevation[k] = float(n.get("elevation", n["head"]))
        elif kind == "tank":
            fixed[k] = True
            head0[k] = elevation[k] + float(n["level"])
        else:
            demand[k] = float(n.get("demand", 0.0)) * 1e-3  # L/s -> m3/s
    frm = np.array([index[link["from"]] for link in links])
    to = np.array([index[link["to"]] for link in links])
    length = np.array([float(link["length"]) for link in links])
    diameter = np.array([float(link["diameter"]) for link in links]) * 1e-3
    c = np.array([float(link["roughness"]) for link in links])
    minor = np.array([float(link.get("minor_loss", 0.0)) for link in links])
    r = length / (0.849 * c * (np.pi / 4.0) * diameter**2 * (diameter / 4.0) ** 0.63) ** HW_EXPONENT
    area = np.pi * diameter**2 / 4.0
    m = minor / (2.0 * G * area**2)

    unknown = np.flatnonzero(~fixed)
    position = -np.ones(n_nodes, dtype=np.int64)
    position[unknown] = np.arange(len(unknown))
    n_links = len(links)
    rows = np.arange(n_links)
    # A12: links x nodes, -1 at the start node and +1 at the end node (h = H_from - H_to).
    a12 = sp.csr_matrix(
        (np.r_[-np.ones(n_links), np.ones(n_links)], (np.r_[rows, rows], np.r_[frm, to])), shape=(n_links, n_nodes)
    )
    a12u = a12[:, unknown].tocsc()
    a21u = a12u.T.tocsr()
    a10h0 = a12[:, fixed] @ head0[fixed]
    q = demand[unknown]

    flow = np.full(n_links, 1e-3)  # 1 L/s in every pipe to start
    q_floor = 1e-4 * area
    heads = np.zeros(len(unknown))
    factor = None
    for iteration in range(1, 201):
        aq = np.abs(flow)
        h = r * flow * aq ** (HW_EXPONENT - 1.0) + m * flow * aq
        # The slope at no less than a velocity of 1e-4 m/s: the usual guard of the gradient
        # method against the infinite 1/g of a pipe with no flow (a dead end without demand).
        aq_g = np.maximum(aq, q_floor)
        g = HW_EXPONENT * r * aq_g ** (HW_EXPONENT - 1.0) + 2.0 * m * aq_g
        ginv = 1.0 / g
        lap = (a21u @ sp.diags(ginv) @ a12u).tocsc()
        rhs = a21u @ flow - q - a21u @ (ginv * (h + a10h0))
        if factor is None:
            factor = cholesky(lap)
        else:
            factor.cholesky_inplace(lap)
        new_heads = factor(rhs)
        new_flow = flow - ginv * (h + a12u @ new_heads + a10h0)
        dq = np.abs(new_flow - flow).sum() / max(np.abs(new_flow).sum(), 1e-12)
        dh = np.abs(new_heads - heads).max() if iteration > 1 else np.inf
        flow, heads = new_flow, new_heads
        if dq < 1e-6 and dh < 1e-4:
            break
    head = head0.copy()
    head[unknown] = heads
    pressure = head - elevation
    with open(out_path, "w") as f:
        json.dump(
            {
                "iterations": iteration,
                "nodes": [{"id": i, "head": hh, "pressure": p} for i, hh, p in zip(ids, head.tolist(), pressure.tolist())],
                "links": [{"id": link["id"], "flow": qq * 1e3} for link, qq in zip(links, flow.tolist())],
            },
            f,
        )


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
