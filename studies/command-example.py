#!/usr/bin/env python3
"""An example training script for a `command` model of closure-budget (needs only NumPy).

It shows the protocol, not a good model. closure-budget runs it once per point of a study
(model, replicate, subset size n) with the path of a manifest as its last argument (also in the
environment variable CLOSURE_BUDGET_MANIFEST). The manifest (JSON) names the files:

  train.npy      n x d training samples (float64), one row per saved sample
  histories.npy  M x (warm-up + 1) x d: the truth before each test initial condition; the last
                 row of each history is the initial condition
  output         where to write the answer:
                   returns = "forecasts": forecasts.npy, M x max-lead x d float64, the forecast at
                   leads 1..max-lead after each initial condition; closure-budget scores it with
                   its own valid prediction time (manifest "skill-definition")
                   returns = "skill": skill.json, {"valid-times": [M numbers]}, scored here
                   against truth.npy (M x max-lead x d), which the manifest then also names

Exit with status 0 once the output is written; anything else (a traceback, a non-zero exit, a
timeout) stops the study with the last lines of stderr quoted.

The model: a one-step emulator. Ridge regression maps linear and quadratic features of the
standardised state x_t to the standardised increment x_{t+1} - x_t; a forecast applies it
max-lead times from the initial condition. (Quadratic features suit Lorenz-96, whose tendency is
quadratic in the state.) The warm-up rows of each history are not needed by a model without
memory; a recurrent network would run through them first.
"""

import json
import sys

import numpy as np

# Ridge penalty per training pair, on standardised features.
RIDGE = 1e-6


def features(z):
    """Constant, linear and quadratic (all products z_i z_j, i <= j) features of rows z."""
    rows, d = z.shape
    i, j = np.triu_indices(d)
    return np.hstack([np.ones((rows, 1)), z, z[:, i] * z[:, j]])


def fit(train):
    """Ridge regression of standardised increments on features of the standardised state."""
    mean, scale = train.mean(axis=0), train.std(axis=0)
    steps = np.diff(train, axis=0)
    step_scale = steps.std(axis=0)
    a = features((train[:-1] - mean) / scale)
    y = steps / step_scale
    gram = a.T @ a + RIDGE * len(a) * np.eye(a.shape[1])
    weights = np.linalg.solve(gram, a.T @ y)
    return mean, scale, step_scale, weights


def forecast(model, initial, leads):
    """Forecasts `leads` steps from every row of `initial` at once: leads x M x d."""
    mean, scale, step_scale, weights = model
    x = initial.copy()
    out = np.empty((leads,) + x.shape)
    # A diverging forecast may overflow: NaN and infinity count as a blow-up when scored.
    with np.errstate(all="ignore"):
        for k in range(leads):
            x = x + (features((x - mean) / scale) @ weights) * step_scale
            out[k] = x
    return out


def valid_times(forecasts, truth, manifest):
    """The manifest's skill definition, for returns = "skill" (closure-budget's own scorer is
    used with returns = "forecasts")."""
    mean, sigma = np.array(manifest["mean"]), np.array(manifest["sigma"])
    with np.errstate(all="ignore"):
        error = np.sqrt(np.mean(((forecasts - truth) / sigma) ** 2, axis=2))
        blown = ~np.isfinite(forecasts).all(axis=2) | (
            np.abs((forecasts - mean) / sigma) > 50
        ).any(axis=2)
    valid = (error <= manifest["threshold"]) & ~blown
    # Leads valid before the first failure (all of them if none failed).
    good = np.where(valid.all(axis=1), valid.shape[1], np.argmin(valid, axis=1))
    first_failure = np.minimum(good, valid.shape[1] - 1)
    return {
        "valid-times": (good * manifest["sample-interval"]).tolist(),
        "censored": valid.all(axis=1).tolist(),
        "blew-up": (~valid.all(axis=1) & blown[np.arange(len(good)), first_failure]).tolist(),
    }


def main():
    with open(sys.argv[-1]) as f:
        manifest = json.load(f)
    paths = manifest["paths"]
    # A script with random choices would seed them: np.random.default_rng(manifest["seed"]).
    model = fit(np.load(paths["train"]))
    histories = np.load(paths["histories"])
    leads = manifest["max-lead"]
    forecasts = forecast(model, histories[:, -1, :], leads).transpose(1, 0, 2)
    print(f"n = {manifest['n']}: forecast {len(histories)} initial conditions, {leads} leads")
    if manifest["returns"] == "forecasts":
        np.save(paths["output"], np.ascontiguousarray(forecasts, dtype=np.float64))
    else:
        skill = valid_times(forecasts, np.load(paths["truth"]), manifest)
        with open(paths["output"], "w") as f:
            json.dump(skill, f)


if __name__ == "__main__":
    main()
