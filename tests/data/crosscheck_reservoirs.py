#!/usr/bin/env python3
"""Independent NumPy check of closure-budget's echo state network and NG-RC.

Reads a case folder written by tests/crosscheck.rs:

  case.json              the test: truth file, initial conditions, skill definition, models
  <truth>.npy            raw truth rows the test forecasts start from
  <train>.npy            raw training rows of a model (its first `samples` rows are its prefix)
  <model>/model.json     the exported model (closure-budget's esn::export / ngrc::export):
                         settings, feature definition, penalty as applied, file names
  <model>/*.npy          its parts (reservoir, input matrix, bias, standardisation, readout)
  <model>/tool-forecasts.npy   the tool's forecasts, initial conditions x leads x variables
  <model>/tool-valid-times.npy the tool's valid times per initial condition

From the parts and the raw training data alone (no feature matrix of the tool's), it rebuilds the
features, solves the same ridge problem, forecasts from the same initial conditions and scores
them by the tool's definition of valid time, then compares:

  settings     the penalty as applied (ridge x training pairs under per-sample scaling), the
               pair count, and for the ESN the nonzeros per row of W and its spectral radius
               (NumPy eigenvalues) against the target
  readout      relative Frobenius difference of the readouts <= 1e-6 (see READOUT_TOL)
  one-step     the tool's first forecast lead against this script's (its own readout), per
               variable j in standardised units: |difference| <= ||W_tool,j - W_numpy,j|| ||phi||
               (Cauchy-Schwarz) + 1e-10 sum_i |W_tool,ji phi_i| (round-off of features rebuilt
               here: tanh and sums in another order, about 1e-15 per step, not amplified by a
               reservoir of spectral radius below 1; measured differences 2e-13 to 7e-13)
  forecast     the tool's forecasts against this script's with the tool's readout, in
               normalised units up to the tool's valid lead (FORECAST_TOL)
  skill        valid times recomputed here from the tool's forecasts equal the tool's, exactly
  valid-times  valid times of this script's own recipe (its features, its readout) equal the
               tool's per initial condition to 1e-6 (valid times are whole leads times the sample
               interval, so: the same lead), or the threshold lies between two forecasts that
               agree to TIE_TOL at the deciding lead (see valid_times_agree), which forecasts
               that differ by round-off can do

Prints one line per check to standard error and the verdict as JSON to standard output; exits
0 when every check passes, 1 when one fails, 2 when the case cannot be read.

Usage: crosscheck_reservoirs.py CASE_DIR [--solve qr|normal] [--ill-conditioned]
"""

import json
import math
import os
import sys
from pathlib import Path

# One BLAS thread unless told otherwise: the test runs beside other tests, where threaded
# OpenBLAS was measured ten times slower (QR of 4300 x 309: 0.96 s against 0.08 s on one thread).
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402  (after the thread settings, which NumPy reads on import)

EPS = np.finfo(float).eps

# Readouts must agree to this relative Frobenius difference. The tool solves the normal
# equations (G + lambda I) W = B by Cholesky, G and B summed in blocks; its forward error is at
# most about c * eps * kappa, kappa = cond(G + lambda I) (Higham 2002, "Accuracy and Stability of
# Numerical Algorithms", section 10.1; from memory), and usually far less. This script's
# reference solve (QR of the augmented system [Phi; sqrt(lambda) I], which never forms G) errs
# by about eps * sqrt(kappa) when the residual is small (Higham 2002, chapter 20; from memory),
# so the difference measures the tool's error. 1e-6 is the bound
# 64 * eps * kappa for kappa up to 7e7 (the small case of tests/crosscheck.rs has kappa of 1e6
# to 4e6 and measured differences of 1e-11 to 1e-10); at larger kappa the bound exceeds 1e-6 and
# the check reports it: measured at kappa = 9e9 (500 units, ridge 1e-8 per pair) the
# differences stayed at 1e-7 to 2.2e-7. --ill-conditioned accepts the bound itself instead.
READOUT_TOL = 1e-6
# Forecasts with the same readout differ only by round-off (tanh from one exponential in the
# tool, NumPy's tanh here, and sums in another order: about 1e-15 per step), which a forecast
# can amplify; up to the valid lead, where the error stays below the threshold, the difference
# must stay below this, in units of the climatological standard deviation (measured: 1e-14 in
# the small case, at most 4.3e-9 over leads of up to 8 time units at 500 units).
FORECAST_TOL = 1e-6
# A valid time may differ only where the normalised errors of the two forecasts straddle the
# threshold at the deciding lead and differ from each other by at most this.
TIE_TOL = 1e-6
# The tool scales W by a power-iteration estimate of its spectral radius (relative error of
# order 0.2% for eigenvalues that fill a disc); the NumPy spectral radius must be this close.
RADIUS_TOL = 0.02


class CaseError(Exception):
    pass


def load(path):
    try:
        return np.load(path)
    except (OSError, ValueError) as e:
        raise CaseError(f"cannot read {path}: {e}; rerun the test that writes the case") from e


def read_json(path):
    try:
        return json.loads(Path(path).read_text())
    except (OSError, ValueError) as e:
        raise CaseError(f"cannot read {path}: {e}; rerun the test that writes the case") from e


# ---------------------------------------------------------------------------- features


class Esn:
    def __init__(self, folder, m):
        self.m = m
        f = m["files"]
        self.W = load(folder / f["recurrent"])
        self.Win = load(folder / f["input"])
        self.b = load(folder / f["bias"])
        self.alpha = float(m["leak-rate"])
        self.sq = np.asarray(m["squared-units"], dtype=int)
        self.first = int(m["readout"]["first-pair"])

    def step(self, r, u):
        """r: (M, D) states, u: (M, d) standardised inputs; one update of every state."""
        pre = r @ self.W.T + u @ self.Win.T + self.b
        return (1.0 - self.alpha) * r + self.alpha * np.tanh(pre)

    def phi(self, r):
        """Features of states r (M, D): [1, r, r[sq]^2]."""
        ones = np.ones((r.shape[0], 1))
        return np.hstack([ones, r, r[:, self.sq] ** 2])

    def design(self, u):
        """Rows and targets of the training problem on standardised rows u (n, d): the state
        after the step with u(t), for t = first .. n - 2, and u(t + 1) - u(t)."""
        n, D = u.shape[0], self.W.shape[0]
        drive = u @ self.Win.T + self.b
        states = np.empty((n - 1, D))
        r = np.zeros(D)
        for t in range(n - 1):
            r = (1.0 - self.alpha) * r + self.alpha * np.tanh(self.W @ r + drive[t])
            states[t] = r
        rows = states[self.first:]
        return self.phi(rows), u[self.first + 1:] - u[self.first:-1]

    def forecast(self, hist, steps, readout):
        """hist: (M, h, d) standardised histories; the last row is the initial condition.
        Returns (M, steps, d) standardised forecasts and the features of the first lead."""
        M, h, d = hist.shape
        r = np.zeros((M, self.W.shape[0]))
        for t in range(h - 1):
            r = self.step(r, hist[:, t])
        u = hist[:, -1].copy()
        out = np.empty((M, steps, d))
        first_phi = None
        with np.errstate(all="ignore"):
            for k in range(steps):
                r = self.step(r, u)
                p = self.phi(r)
                if k == 0:
                    first_phi = p
                u = u + p @ readout.T
                out[:, k] = u
        return out, first_phi

    def settings_checks(self):
        m = self.m
        checks = []
        nnz = np.count_nonzero(self.W, axis=1)
        degree = int(m["degree"])
        checks.append(
            check(
                "settings",
                bool(np.all(nnz == degree)),
                f"nonzeros per row of W from {nnz.min()} to {nnz.max()}, degree {degree}",
            )
        )
        target = float(m["spectral-radius"]["target"])
        rho = float(np.max(np.abs(np.linalg.eigvals(self.W))))
        rel = abs(rho - target) / target
        checks.append(
            check(
                "settings",
                rel <= RADIUS_TOL,
                f"spectral radius of W {rho:.5f} (NumPy eigenvalues) against the target "
                f"{target} ({rel:.2%}, allowed {RADIUS_TOL:.0%})",
            )
        )
        sq = self.sq
        D = self.W.shape[0]
        checks.append(
            check(
                "settings",
                bool(np.array_equal(sq, np.arange(D // 2))),
                f"squared units: {len(sq)} of {D}, "
                + ("the first half, in order" if np.array_equal(sq, np.arange(D // 2)) else f"{sq[:6]}..."),
            )
        )
        return checks


class Ngrc:
    def __init__(self, folder, m):
        self.m = m
        self.k = int(m["delays"])
        self.s = int(m["stride"])
        if int(m["order"]) != 2 or not m["constant"]:
            raise CaseError(f"{folder}/model.json: only order 2 with a constant is rebuilt here")
        self.first = int(m["readout"]["first-pair"])

    def phi_lin(self, lin):
        L = lin.shape[1]
        i, j = np.triu_indices(L)  # row-major order of the upper triangle, i <= j
        return np.hstack([np.ones((lin.shape[0], 1)), lin, lin[:, i] * lin[:, j]])

    def design(self, u):
        n = u.shape[0]
        span = (self.k - 1) * self.s
        ts = np.arange(span, n - 1)
        lin = np.hstack([u[ts - lag * self.s] for lag in range(self.k)])
        return self.phi_lin(lin), u[ts + 1] - u[ts]

    def forecast(self, hist, steps, readout):
        M, h, d = hist.shape
        window = (self.k - 1) * self.s + 1
        # The last `window` rows; with fewer rows the earliest stands in for the missing ones.
        idx = [max(h - window + i, 0) for i in range(window)]
        ring = [hist[:, i].copy() for i in idx]
        out = np.empty((M, steps, d))
        first_phi = None
        with np.errstate(all="ignore"):
            for k in range(steps):
                lin = np.hstack([ring[-1 - lag * self.s] for lag in range(self.k)])
                p = self.phi_lin(lin)
                if k == 0:
                    first_phi = p
                nxt = lin[:, :d] + p @ readout.T
                ring = ring[1:] + [nxt]
                out[:, k] = nxt
        return out, first_phi

    def settings_checks(self):
        L = self.k * int(self.m["variables"])
        F = 1 + L + L * (L + 1) // 2
        return [
            check(
                "settings",
                F == int(self.m["feature-count"]),
                f"{F} features for {self.k} delays of {self.m['variables']} variables",
            )
        ]


# ---------------------------------------------------------------------------- checks


def check(name, ok, detail):
    return {"check": name, "ok": bool(ok), "detail": detail}


def solve(phi, y, lam, method):
    """Ridge readout (outputs x features) and kappa = cond(Phi'Phi + lambda I).

    qr: least squares on the augmented system [Phi; sqrt(lambda) I] w = [y; 0] by a QR
    factorisation of [A | b] (the top right block of its R is Q'b), which never forms the
    normal equations; normal: np.linalg.solve on them."""
    F = phi.shape[1]
    g = phi.T @ phi + lam * np.eye(F)
    ev = np.linalg.eigvalsh(g)
    kappa = ev[-1] / ev[0]
    if method == "normal":
        return np.linalg.solve(g, phi.T @ y).T, kappa
    a = np.vstack([phi, math.sqrt(lam) * np.eye(F)])
    b = np.vstack([y, np.zeros((F, y.shape[1]))])
    r = np.linalg.qr(np.hstack([a, b]), mode="r")
    w = np.linalg.solve(np.triu(r[:F, :F]), r[:F, F:])
    return w.T, kappa


def normalised_errors(x, truth_rows, mean, sigma):
    """Per lead: the tool's normalised error and blow-up flag (src/skill/mod.rs), the squares
    summed variable by variable in the tool's order."""
    inv = 1.0 / sigma
    steps, d = x.shape
    sq = np.zeros(steps)
    blew = np.zeros(steps, dtype=bool)
    with np.errstate(all="ignore"):
        for j in range(d):
            z = (x[:, j] - truth_rows[:, j]) * inv[j]
            sq = sq + z * z
            excursion = (x[:, j] - mean[j]) * inv[j]
            blew |= np.isnan(excursion) | (np.abs(excursion) > 50.0)
        err = np.sqrt(sq / d)
    return err, blew


def valid_lead(err, blew, threshold):
    """Last lead (1-based) up to which every error stayed at or below the threshold."""
    for k in range(len(err)):
        if blew[k] or math.isnan(err[k]) or err[k] > threshold:
            return k
    return len(err)


def valid_times_agree(k_tool, k_np, err_tool, err_np, threshold):
    """Equal valid leads, or a tie: at the deciding lead (the first where exactly one forecast
    is out) both errors are finite, straddle the threshold and differ by at most TIE_TOL."""
    if k_tool == k_np:
        return True, ""
    k = min(k_tool, k_np)  # 0-based index of the lead where one forecast leaves the threshold
    a, b = err_tool[k], err_np[k]
    tie = np.isfinite(a) and np.isfinite(b) and abs(a - b) <= TIE_TOL
    return tie, f"lead {k + 1}: errors {a:.9f} (tool) and {b:.9f} (NumPy), threshold {threshold}"


def check_model(case_dir, case, entry, truth, args):
    folder = case_dir / entry["dir"]
    m = read_json(folder / "model.json")
    fam = {"esn": Esn, "ngrc": Ngrc}.get(m.get("family"))
    if fam is None:
        raise CaseError(f"{folder}/model.json: family {m.get('family')!r}; allowed: esn, ngrc")
    model = fam(folder, m)
    fit = m["readout"]
    mean, scale = load(folder / m["files"]["mean"]), load(folder / m["files"]["scale"])
    w_tool = load(folder / fit["weights"])
    n = int(fit["samples"])
    train = load(case_dir / entry["train"])[:n]
    if train.shape[0] < n:
        raise CaseError(f"{entry['train']}: {train.shape[0]} rows, the model needs {n}")
    u = (train - mean) / scale
    checks = model.settings_checks()

    phi, y = model.design(u)
    pairs = phi.shape[0]
    ridge = float(fit["ridge"])
    lam = ridge * pairs if fit["ridge-scaling"] == "per-sample" else ridge
    if fit["ridge-selection"] != "fixed":
        lam = float(fit["lambda"])  # chosen by the tool: solved again at its value
    checks.append(
        check(
            "settings",
            pairs == int(fit["training-pairs"]) and abs(lam - float(fit["lambda"])) <= 1e-12 * lam,
            f"{pairs} training pairs (tool {fit['training-pairs']}), penalty {lam:.6e} "
            f"(tool {float(fit['lambda']):.6e}, {fit['ridge-scaling']})",
        )
    )

    w_np, kappa = solve(phi, y, lam, args["solve"])
    rel = np.linalg.norm(w_np - w_tool) / np.linalg.norm(w_np)
    bound = 64 * EPS * kappa
    tol = max(READOUT_TOL, bound) if args["ill_conditioned"] else READOUT_TOL
    note = "" if bound <= READOUT_TOL else f"; the a-priori bound 64 eps kappa = {bound:.1e} exceeds {READOUT_TOL:.0e}"
    checks.append(
        check(
            "readout",
            rel <= tol,
            f"relative Frobenius difference {rel:.2e} (allowed {tol:.1e}); "
            f"cond(G + lambda I) = {kappa:.2e}{note}",
        )
    )

    sk = case["skill"]
    warm, lead = int(sk["warm-up"]), int(sk["max-lead"])
    thr, dt = float(sk["threshold"]), float(sk["sample-interval"])
    smean, sigma = np.asarray(sk["mean"]), np.asarray(sk["sigma"])
    ics = [int(i) for i in case["initial-conditions"]]
    hist = np.stack([(truth[i - warm:i + 1] - mean) / scale for i in ics])
    tool_x = load(folder / "tool-forecasts.npy")
    tool_vt = load(folder / "tool-valid-times.npy")
    mine_std, phi0 = model.forecast(hist, lead, w_np)
    same_std, _ = model.forecast(hist, lead, w_tool)
    mine = mine_std * scale + mean
    same = same_std * scale + mean

    # One-step: the first lead, in standardised units, against the bound of the readout change.
    first_tool = (tool_x[:, 0] - mean) / scale
    diff = np.abs(mine_std[:, 0] - first_tool)
    dw = np.linalg.norm(w_np - w_tool, axis=1)
    roundoff = 1e-10 * (np.abs(phi0) @ np.abs(w_tool).T)
    allowed = np.linalg.norm(phi0, axis=1)[:, None] * dw[None, :] + roundoff
    checks.append(
        check(
            "one-step",
            bool(np.all(diff <= allowed)),
            f"largest difference {diff.max():.2e} (standardised units), largest allowed "
            f"{allowed.max():.2e}",
        )
    )

    worst_forecast, skill_ok, agree, ties, details = 0.0, True, True, 0, []
    vt_np = []
    for c, ic in enumerate(ics):
        rows = truth[ic + 1:ic + 1 + lead]
        e_tool, b_tool = normalised_errors(tool_x[c], rows, smean, sigma)
        k_tool = valid_lead(e_tool, b_tool, thr)
        if abs(k_tool * dt - tool_vt[c]) > 1e-9:
            skill_ok = False
            details.append(f"IC {ic}: tool valid time {tool_vt[c]}, its forecast scores {k_tool * dt}")
        if k_tool > 0:
            d = np.abs(same[c, :k_tool] - tool_x[c, :k_tool]) / sigma
            worst_forecast = max(worst_forecast, float(np.nanmax(d)) if np.all(np.isfinite(d)) else math.inf)
        e_np, b_np = normalised_errors(mine[c], rows, smean, sigma)
        k_np = valid_lead(e_np, b_np, thr)
        vt_np.append(k_np * dt)
        ok, why = valid_times_agree(k_tool, k_np, e_tool, e_np, thr)
        if k_tool != k_np:
            if ok:
                ties += 1
            else:
                agree = False
                details.append(f"IC {ic}: valid time {tool_vt[c]:.4f} (tool) vs {k_np * dt:.4f} (NumPy), {why}")
    checks.append(
        check(
            "forecast",
            worst_forecast <= FORECAST_TOL,
            f"with the tool's readout, largest difference from the tool's forecasts up to its "
            f"valid leads {worst_forecast:.2e} sigma (allowed {FORECAST_TOL:.0e})",
        )
    )
    checks.append(
        check(
            "skill",
            skill_ok,
            "valid times recomputed from the tool's forecasts equal the tool's"
            + ("" if skill_ok else ": " + "; ".join(d for d in details if "scores" in d)),
        )
    )
    vt_np = np.asarray(vt_np)
    checks.append(
        check(
            "valid-times",
            agree,
            f"{len(ics)} initial conditions, {int(np.sum(np.abs(vt_np - tool_vt) <= 1e-6))} equal, "
            f"{ties} threshold ties; mean {tool_vt.mean():.4f} (tool) vs {vt_np.mean():.4f} (NumPy)"
            + ("" if agree else ": " + "; ".join(d for d in details if "vs" in d)),
        )
    )
    return {
        "model": entry["dir"],
        "family": m["family"],
        "samples": n,
        "ok": all(c["ok"] for c in checks),
        "checks": checks,
        "readout-relative-difference": float(rel),
        "condition-number": float(kappa),
        "tool-mean-valid-time": float(tool_vt.mean()),
        "numpy-mean-valid-time": float(vt_np.mean()),
        "numpy-valid-times": vt_np.tolist(),
    }


def main(argv):
    if not argv or argv[0].startswith("-"):
        print(__doc__, file=sys.stderr)
        return 2
    case_dir = Path(argv[0])
    args = {"solve": "qr", "ill_conditioned": False}
    rest = argv[1:]
    while rest:
        a = rest.pop(0)
        if a == "--solve" and rest and rest[0] in ("qr", "normal"):
            args["solve"] = rest.pop(0)
        elif a == "--ill-conditioned":
            args["ill_conditioned"] = True
        else:
            print(f"unknown argument {a!r}; allowed: --solve qr|normal, --ill-conditioned", file=sys.stderr)
            return 2
    try:
        case = read_json(case_dir / "case.json")
        truth = load(case_dir / case["truth"])
        results = [check_model(case_dir, case, e, truth, args) for e in case["models"]]
    except (CaseError, KeyError) as e:
        print(f"crosscheck: {e}", file=sys.stderr)
        return 2
    for r in results:
        for c in r["checks"]:
            mark = "ok  " if c["ok"] else "FAIL"
            print(f"{mark} {r['model']:<16} {c['check']:<12} {c['detail']}", file=sys.stderr)
    verdict = "agree" if all(r["ok"] for r in results) else "disagree"
    print(json.dumps({"verdict": verdict, "models": results}))
    return 0 if verdict == "agree" else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
