#!/usr/bin/env python3
"""Reference solutions of hardmax's training objective by scikit-learn (an independent library).

hardmax trains with linfa-logistic's MultiLogisticRegression, which minimises (linfa-logistic
0.8.1, src/lib.rs, `multi_logistic_loss`)

    f(W, b) = -sum_i log softmax(x_i W + b)[y_i] + (alpha / 2) ||W||_F^2      (b not penalised)

on the features hardmax gives it: each feature min-max scaled to [0, 1] over the training set
(a feature with zero range maps to 0), no standardisation (the trainer's default).
scikit-learn's LogisticRegression (lbfgs, multinomial, intercept not penalised) minimises
C * sum_i log-loss + ||W||^2 / 2, which has the same minimiser at C = 1 / alpha.

For each shipped dataset (the whole dataset is the training set) this script solves that problem
to a tight tolerance and writes NAME.json: the coefficients, intercepts, predictions, and the
objective f and its gradient norm at the solution (evaluated here with the linfa formula above).
tests/training_sklearn.rs compares hardmax's trainer against these files; it needs no Python.

Regenerate (from the repository root):  python3 tests/data/sklearn_reference/make.py
"""
import csv
import json
import os

import numpy as np
import sklearn
from sklearn.linear_model import LogisticRegression

ALPHA = 0.3  # hardmax's default `training.l2` (LogisticOptions::default().l2)
HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "..", "..", "..", "datasets")


def load(name):
    with open(os.path.join(DATA, name + ".csv"), newline="") as f:
        rows = list(csv.reader(f))
    header, rows = rows[0], rows[1:]
    li = header.index("label")
    x = np.array([[float(v) for j, v in enumerate(r) if j != li] for r in rows])
    labels = [r[li] for r in rows]
    return x, labels


def minmax(x):
    lo, hi = x.min(axis=0), x.max(axis=0)
    rng = hi - lo
    out = np.zeros_like(x)
    ok = rng > 0
    out[:, ok] = np.clip((x[:, ok] - lo[ok]) / rng[ok], 0.0, 1.0)
    return out


def objective_and_gradient(u, y, w, b, alpha):
    h = u @ w.T + b
    m = h.max(axis=1, keepdims=True)
    lse = m[:, 0] + np.log(np.exp(h - m).sum(axis=1))
    loss = -(h[np.arange(len(y)), y] - lse).sum() + 0.5 * alpha * (w * w).sum()
    p = np.exp(h - lse[:, None])
    p[np.arange(len(y)), y] -= 1.0
    gw = p.T @ u + alpha * w
    gb = p.sum(axis=0)
    return loss, float(np.sqrt((gw * gw).sum() + (gb * gb).sum()))


def main():
    for name in ["iris", "wine", "digits"]:
        x, labels = load(name)
        u = minmax(x)
        classes = sorted(set(labels))
        y = np.array([classes.index(v) for v in labels])
        m = LogisticRegression(C=1.0 / ALPHA, tol=1e-12, max_iter=100000)
        m.fit(u, y)
        w, b = m.coef_, m.intercept_
        f, g = objective_and_gradient(u, y, w, b, ALPHA)
        out = {
            "source": "scikit-learn %s LogisticRegression(C=1/alpha, tol=1e-12, max_iter=100000), "
            "lbfgs, multinomial; written by tests/data/sklearn_reference/make.py"
            % sklearn.__version__,
            "dataset": name,
            "alpha": ALPHA,
            "classes": classes,
            "coef": w.tolist(),
            "intercept": b.tolist(),
            "predictions": m.predict(u).tolist(),
            "objective": f,
            "gradient_norm": g,
        }
        with open(os.path.join(HERE, name + ".json"), "w") as fh:
            json.dump(out, fh, indent=1)
            fh.write("\n")
        print(name, "objective", f, "gradient norm", g, "iterations", m.n_iter_)


if __name__ == "__main__":
    main()
