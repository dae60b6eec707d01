"""An independent numpy implementation of goalsmith's reward fits, and reference values for them.

Maximum-entropy inverse RL (Ziebart, Maas, Bagnell & Dey, "Maximum Entropy Inverse
Reinforcement Learning", AAAI 2008) on a grid MDP with deterministic moves (stay or one of 8
neighbours), every demo scored for its own horizon (Snoswell, Singh & Ye, "Revisiting Maximum
Entropy Inverse Reinforcement Learning", 2020). Written from the paper, vectorised over states;
the Rust code it checks differs on purpose in how it computes the same quantities:

  backward  V_0 = r, V_k(s) = r(s) + logsumexp over s' in N(s) of V_{k-1}(s'), each state's
            log-sum-exp shifted by its own maximum (the Rust code shares one shift per step);
  forward   one pass per distinct horizon T, from that horizon's demos' start counts, pushing
            mass along pi_{T-t}(s'|s) = exp(V_{T-t-1}(s') - V_{T-t}(s) + r(s)) (the Rust code runs
            one pass for all horizons, starting each demo when its horizon's moves are left);
  objective f(w) = (1/M) sum_i [sum_t r(s_t^i) - V_{T_i}(s_0^i)] - (l2/2)|w|^2, M = sum_i T_i;
            grad f = (empirical - expected feature counts)/M - l2 w, counts over all T_i + 1
            states of each demo;
  fit       scipy.optimize.minimize(method="L-BFGS-B") on -f from w = 0.

Features at cell centres (the centre of a cell's covered part), standardised over the states
(population std; a constant feature becomes 0 with scale 1).

The functions are reused by bench_irl_compare.py. Run from the repository root:

  tests/reference/.venv/bin/python tests/reference/gen_irl.py   # writes irl_numpy.json
"""

import json
import pathlib

import numpy as np
import scipy
import scipy.optimize

HERE = pathlib.Path(__file__).resolve().parent


# ---------------------------------------------------------------------------------------------
# The grid, its features and the passes


def build_grid(width, height, cell_px, no_go=(), remove_no_go=False):
    """States, their centres and an (S, 9) neighbour table padded with S (a dummy state)."""
    cols, rows = -(-width // cell_px), -(-height // cell_px)

    def centre(i, size):
        lo, hi = i * cell_px, min((i + 1) * cell_px, size)
        return (lo + hi - 1) / 2.0

    cx = np.array([centre(c, width) for c in range(cols)])
    cy = np.array([centre(r, height) for r in range(rows)])
    X, Y = np.meshgrid(cx, cy)  # (rows, cols)
    nogo = np.zeros((rows, cols), bool)
    for polygon in no_go:
        nogo |= inside(polygon, X, Y)
    keep = ~nogo if remove_no_go else np.ones_like(nogo)
    state_of = -np.ones((rows, cols), int)
    state_of[keep] = np.arange(keep.sum())
    rr, cc = np.nonzero(keep)  # row-major, as the states are numbered
    S = len(rr)
    offsets = [(0, 0)] + [(dr, dc) for dr in (-1, 0, 1) for dc in (-1, 0, 1) if (dr, dc) != (0, 0)]
    nbr = np.full((S, 9), S, int)
    for j, (dr, dc) in enumerate(offsets):
        r2, c2 = rr + dr, cc + dc
        ok = (r2 >= 0) & (r2 < rows) & (c2 >= 0) & (c2 < cols)
        t = np.full(S, -1)
        t[ok] = state_of[r2[ok], c2[ok]]
        nbr[t >= 0, j] = t[t >= 0]
    return {"width": width, "height": height, "cell_px": cell_px, "cols": cols, "rows": rows,
            "state_of": state_of, "x": X[keep], "y": Y[keep], "nogo": nogo[keep], "nbr": nbr, "S": S}


def inside(polygon, x, y):
    """Closed point-in-polygon by the crossing rule, with points on an edge counted inside."""
    p = np.asarray(polygon, float)
    res = np.zeros(np.shape(x), bool)
    on_edge = np.zeros(np.shape(x), bool)
    n = len(p)
    for i in range(n):
        (x1, y1), (x2, y2) = p[i], p[(i + 1) % n]
        cross = (x2 - x1) * (y - y1) - (y2 - y1) * (x - x1)
        within = (np.minimum(x1, x2) <= x) & (x <= np.maximum(x1, x2)) & (np.minimum(y1, y2) <= y) & (y <= np.maximum(y1, y2))
        on_edge |= (cross == 0) & within
        spans = (y1 > y) != (y2 > y)
        with np.errstate(divide="ignore", invalid="ignore"):
            xint = x1 + (y - y1) * (x2 - x1) / (y2 - y1)
        res ^= spans & (x < xint)
    return res | on_edge


def raw_features(grid, features):
    x, y = grid["x"], grid["y"]
    diag = np.hypot(grid["width"], grid["height"])
    cols = []
    for f in features:
        kind = f["kind"]
        if kind == "distance_to":
            cols.append(np.hypot(x - f["point"][0], y - f["point"][1]) / diag)
        elif kind == "inside":
            cols.append(inside(f["polygon"], x, y).astype(float))
        elif kind == "rbf":
            d2 = (x - f["centre"][0]) ** 2 + (y - f["centre"][1]) ** 2
            cols.append(np.exp(-d2 / (2 * f["sigma_px"] ** 2)))
        elif kind == "no_go":
            cols.append(grid["nogo"].astype(float))
        else:
            raise ValueError(kind)
    return np.stack(cols, axis=1)


def standardise(raw):
    mean = raw.mean(axis=0)
    std = raw.std(axis=0)
    constant = ~(std > 1e-12 * np.maximum(1.0, np.abs(mean)))
    scale = np.where(constant, 1.0, std)
    phi = np.where(constant, 0.0, (raw - mean) / scale)
    return phi, mean, scale, constant


def build_problem(grid_args, features, demos_cells):
    """demos_cells: lists of [c, r]; returns the problem the passes work on."""
    grid = build_grid(**grid_args)
    phi, mean, scale, constant = standardise(raw_features(grid, features))
    demos = [np.array([grid["state_of"][r, c] for c, r in d]) for d in demos_cells]
    assert all((d >= 0).all() for d in demos)
    return {"grid": grid, "phi": phi, "mean": mean, "scale": scale, "constant": constant, "demos": demos}


def backward(nbr, r, horizon):
    """V[k, s] for k = 0..horizon, log space, each state's log-sum-exp shifted by its maximum."""
    S = len(r)
    V = np.empty((horizon + 1, S))
    V[0] = r
    for k in range(1, horizon + 1):
        Vp = np.append(V[k - 1], -np.inf)[nbr]  # (S, 9), -inf for missing moves
        m = Vp.max(axis=1)
        V[k] = r + m + np.log(np.exp(Vp - m[:, None]).sum(axis=1))
    return V


def evaluate(problem, w, l2):
    """Objective, log-likelihood (sum and per move), gradient and expected visits at w."""
    nbr, phi, demos = problem["grid"]["nbr"], problem["phi"], problem["demos"]
    S = len(phi)
    r = phi @ w
    horizons = np.array([len(d) - 1 for d in demos])
    moves = horizons.sum()
    V = backward(nbr, r, horizons.max())
    ll = sum(r[d].sum() - V[len(d) - 1, d[0]] for d in demos)
    visits = np.zeros(S)
    for T in np.unique(horizons):
        D = np.bincount([d[0] for d in demos if len(d) - 1 == T], minlength=S).astype(float)
        visits += D
        for t in range(T):
            k = T - t  # moves left
            Q = V[k] - r  # log-sum-exp of V[k-1] over the neighbours
            P = np.exp(np.append(V[k - 1], -np.inf)[nbr] - Q[:, None])  # (S, 9)
            D = np.bincount(nbr.ravel(), weights=(D[:, None] * P).ravel(), minlength=S + 1)[:S]
            visits += D
    empirical = sum(phi[d].sum(axis=0) for d in demos)
    grad = (empirical - visits @ phi) / moves - l2 * w
    return {"objective": ll / moves - 0.5 * l2 * w @ w, "log_likelihood": ll,
            "log_likelihood_per_step": ll / moves, "gradient": grad, "visits": visits}


def fit(problem, l2, gtol=1e-12, maxiter=1000):
    def f(w):
        e = evaluate(problem, w, l2)
        return -e["objective"], -e["gradient"]

    res = scipy.optimize.minimize(f, np.zeros(problem["phi"].shape[1]), jac=True, method="L-BFGS-B",
                                  options={"gtol": gtol, "ftol": 1e-15, "maxiter": maxiter, "maxcor": 10})
    return res


# ---------------------------------------------------------------------------------------------
# The fixed problems

def rect(x0, y0, x1, y1):
    return [[x0, y0], [x1, y0], [x1, y1], [x0, y1]]


PROBLEMS = [
    {
        "name": "partial_cells_with_no_go_feature",
        "grid": {"width": 56, "height": 37, "cell_px": 8, "no_go": [rect(40.0, 24.0, 55.0, 36.0)],
                 "remove_no_go": False},
        "features": [
            {"kind": "distance_to", "point": [43.0, 9.0]},
            {"kind": "inside", "polygon": rect(8.0, 8.0, 30.0, 30.0)},
            {"kind": "rbf", "centre": [20.0, 25.0], "sigma_px": 6.0},
            {"kind": "no_go"},
        ],
        "demos": [
            [[0, 4], [1, 3], [2, 2], [3, 1], [4, 1], [5, 1], [5, 1]],
            [[6, 4], [5, 3], [5, 2], [5, 1]],
            [[2, 0]],
            [[0, 0], [1, 0], [2, 1], [3, 1], [4, 0], [5, 1], [5, 1], [5, 1], [6, 2]],
            [[3, 3], [4, 2]],
        ],
        "l2": 0.01,
        "weights": [[-2.0, -0.7, 0.8, -1.0], [1.3, 2.1, -0.4, 0.6]],
    },
    {
        "name": "removed_no_go_cells",
        "grid": {"width": 30, "height": 30, "cell_px": 5, "no_go": [rect(10.0, 10.0, 19.0, 24.0)],
                 "remove_no_go": True},
        "features": [
            {"kind": "distance_to", "point": [27.0, 27.0]},
            {"kind": "rbf", "centre": [5.0, 20.0], "sigma_px": 4.0},
            {"kind": "no_go"},
        ],
        "demos": [
            [[0, 0], [1, 1], [1, 2], [1, 3], [1, 4], [2, 5], [3, 5], [4, 5], [5, 5]],
            [[5, 0], [5, 1], [5, 2], [5, 3], [5, 4], [5, 5]],
            [[0, 5], [1, 5], [2, 5], [3, 5], [4, 4], [5, 5], [5, 5]],
            [[4, 1], [4, 2], [5, 3]],
        ],
        "l2": 0.001,
        "weights": [[-3.0, 0.5, 0.0], [2.0, -1.0, 0.0]],
    },
]


def main():
    out = {"generator": "tests/reference/gen_irl.py", "numpy": np.__version__, "scipy": scipy.__version__,
           "problems": []}
    for spec in PROBLEMS:
        problem = build_problem(spec["grid"], spec["features"], spec["demos"])
        entry = dict(spec)
        entry["states"] = int(problem["grid"]["S"])
        entry["feature_mean"] = problem["mean"].tolist()
        entry["feature_scale"] = problem["scale"].tolist()
        entry["feature_constant"] = problem["constant"].tolist()
        entry["at"] = []
        for w in spec["weights"]:
            e = evaluate(problem, np.array(w, float), spec["l2"])
            entry["at"].append({"weights": w, "objective": e["objective"], "log_likelihood": e["log_likelihood"],
                                "log_likelihood_per_step": e["log_likelihood_per_step"],
                                "gradient": e["gradient"].tolist(), "visits": e["visits"].tolist()})
        res = fit(problem, spec["l2"])
        e = evaluate(problem, res.x, spec["l2"])
        entry["fit"] = {"weights": res.x.tolist(), "objective": e["objective"],
                        "grad_norm": float(np.linalg.norm(e["gradient"])), "iterations": int(res.nit),
                        "message": str(res.message)}
        out["problems"].append(entry)
    path = HERE / "irl_numpy.json"
    path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"wrote {path}")
    for p in out["problems"]:
        print(p["name"], "fit", p["fit"]["weights"], "|g|", p["fit"]["grad_norm"], p["fit"]["message"])


if __name__ == "__main__":
    main()
