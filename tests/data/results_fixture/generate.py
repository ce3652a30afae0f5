#!/usr/bin/env python3
"""Writes the invented results folders used by the report tests (see README.md here).

The numbers are invented: per-chip correct-decision counts are drawn from a made-up model, then
the per-point statistics are computed from them the way DEVELOPERS.md describes (mean, standard
deviation, 5/50/95 % percentiles, yield with a 95 % Wilson score interval), so the three CSV files
agree with each other. Run from this folder: `python3 generate.py`.
"""
import csv, json, math, os, random

rng = random.Random(20261202)
CLASSES = ["setosa", "versicolor", "virginica"]
PER_CLASS = 15                      # test samples per class
SAMPLES = PER_CLASS * len(CLASSES)  # 45
CHIPS = 20
TARGET = 0.9
BIAS = [1e-9, 1e-8, 1e-7]           # competition.bias_current, A (log scale)
BITS = [4, 6]                       # weights.bits, dimensionless
BASELINE = 43 / 45
IDEAL = {4: 42 / 45, 6: 43 / 45}
C_NODE = 50e-15                     # invented node capacitance for decision times
UT_OVER_KAPPA = 0.0259 / 0.7
VDD = 1.8


def percentile(xs, q):
    s = sorted(xs)
    pos = (len(s) - 1) * q
    lo = math.floor(pos)
    hi = min(lo + 1, len(s) - 1)
    return s[lo] + (s[hi] - s[lo]) * (pos - lo)


def wilson(k, n, z=1.959963984540054):
    p = k / n
    den = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z / den * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return max(0.0, centre - half), min(1.0, centre + half)


def simulate_point(bias, bits):
    # Invented: mean error count falls with bias and bits; spread between chips.
    mean_err = 1.0 + 2.2 * (1e-7 / bias) ** 0.18 + (3.0 if bits == 4 else 0.6)
    chips, conf = [], {}
    for chip in range(CHIPS):
        errors = max(0, min(SAMPLES, round(rng.gauss(mean_err, 1.4))))
        amb = sum(1 for _ in range(errors) if rng.random() < 0.25)
        nonconv = 1 if (bias == 1e-9 and rng.random() < 0.1 and errors - amb > 0) else 0
        wrong = errors - amb - nonconv
        decisions = []
        for t in range(len(CLASSES)):
            decisions += [(t, t)] * PER_CLASS
        idx = list(range(SAMPLES))
        rng.shuffle(idx)
        for j, i in enumerate(idx[:errors]):
            t = decisions[i][0]
            if j < amb:
                decisions[i] = (t, "ambiguous")
            elif j < amb + nonconv:
                decisions[i] = (t, "nonconverged")
            else:
                decisions[i] = (t, CLASSES[(t + 1 + rng.randrange(2)) % 3])
        for t, p in decisions:
            key = (CLASSES[t], p if isinstance(p, str) else CLASSES[p])
            conf[key] = conf.get(key, 0) + 1
        correct = SAMPLES - errors
        acc = correct / SAMPLES
        agreement = min(1.0, (correct + rng.choice([0, 0, 1])) / SAMPLES)
        t_dec = C_NODE * UT_OVER_KAPPA / bias * (1 + 0.3 * rng.random())
        energy = VDD * bias * t_dec
        chips.append(dict(chip=chip, accuracy=acc, agreement=agreement, ambiguous=amb,
                          nonconverged=nonconv, samples=SAMPLES,
                          decision_time_mean_s=t_dec, energy_mean_j=energy))
    return chips, conf


def r(x):
    return repr(float(x))


def write(folder, done, status):
    os.makedirs(folder, exist_ok=True)
    points = [(b, w) for b in BIAS for w in BITS]   # grid, last parameter fastest
    prow, crow, frow = [], [], []
    for p, (b, w) in enumerate(points):
        chips, conf = simulate_point(b, w)
        if p >= done:
            if p == done:   # an unfinished point: a few chips were written, no statistics
                for c in chips[:7]:
                    crow.append([p, r(b), w] + [c[k] for k in
                                ("chip", "accuracy", "agreement", "ambiguous", "nonconverged",
                                 "samples", "decision_time_mean_s", "energy_mean_j")])
            continue
        accs = [c["accuracy"] for c in chips]
        mean = sum(accs) / len(accs)
        std = math.sqrt(sum((a - mean) ** 2 for a in accs) / (len(accs) - 1))
        passed = sum(1 for a in accs if a >= TARGET)
        lo, hi = wilson(passed, len(accs))
        amb = sum(c["ambiguous"] for c in chips) / (CHIPS * SAMPLES)
        nonconv = sum(c["nonconverged"] for c in chips)
        prow.append([p, r(b), w, CHIPS, SAMPLES, r(mean), r(std), r(percentile(accs, 0.05)),
                     r(percentile(accs, 0.5)), r(percentile(accs, 0.95)), r(IDEAL[w]),
                     r(BASELINE), r(TARGET), r(passed / len(accs)), r(lo), r(hi),
                     r(sum(c["agreement"] for c in chips) / CHIPS), r(amb), nonconv,
                     r(sum(c["decision_time_mean_s"] for c in chips) / CHIPS),
                     r(sum(c["energy_mean_j"] for c in chips) / CHIPS)])
        for c in chips:
            crow.append([p, r(b), w] + [r(c[k]) if isinstance(c[k], float) else c[k] for k in
                        ("chip", "accuracy", "agreement", "ambiguous", "nonconverged",
                         "samples", "decision_time_mean_s", "energy_mean_j")])
        for (t, pr), n in sorted(conf.items()):
            frow.append([p, t, pr, n])
    head = ["point", "competition.bias_current", "weights.bits"]
    with open(os.path.join(folder, "points.csv"), "w", newline="") as f:
        wr = csv.writer(f, lineterminator="\n")
        wr.writerow(head + ["chips", "samples", "acc_mean", "acc_std", "acc_p05", "acc_p50",
                            "acc_p95", "ideal_acc", "baseline_acc", "target", "yield",
                            "yield_lo", "yield_hi", "agreement_mean", "ambiguous_frac",
                            "nonconverged", "decision_time_mean_s", "energy_mean_j"])
        wr.writerows(prow)
    with open(os.path.join(folder, "chips.csv"), "w", newline="") as f:
        wr = csv.writer(f, lineterminator="\n")
        wr.writerow(head + ["chip", "accuracy", "agreement", "ambiguous", "nonconverged",
                            "samples", "decision_time_mean_s", "energy_mean_j"])
        wr.writerows(crow)
    with open(os.path.join(folder, "confusion.csv"), "w", newline="") as f:
        wr = csv.writer(f, lineterminator="\n")
        wr.writerow(["point", "true_class", "predicted_class", "count"])
        wr.writerows(frow)
    manifest = {
        "format": "hardmax-results", "format_version": 1, "tool_version": "0.1.0",
        "experiment_name": "fixture-iris-bias-bits",
        "description": "INVENTED TEST DATA: bias current against weight resolution on iris "
                       "(numbers are made up for the report tests).",
        "experiment_hash": "0f" * 32,
        "seed": 7, "status": status, "points_total": len(points), "points_done": done,
        "chips_per_point": CHIPS, "target_accuracy": TARGET, "threads": 2, "transient": True,
        "dataset": {"name": "iris", "classes": CLASSES, "features": 4,
                    "train_samples": 105, "test_samples": SAMPLES},
        "competition": "current-mode WTA, 3 cells, ideal bias source (invented fixture)",
        "sweep": {"mode": "grid", "parameters": [
            {"path": "competition.bias_current", "unit": "A", "scale": "log", "values": BIAS},
            {"path": "weights.bits", "unit": "", "scale": "linear", "values": BITS}]},
        "command": "hardmax run experiments/fixture-iris-bias-bits.toml",
        "host": {"os": "linux", "arch": "x86_64", "cpus": 2, "hostname": "fixture-host"},
        "started_unix_s": 1796000000, "elapsed_s": 83.25,
    }
    with open(os.path.join(folder, "manifest.json"), "w") as f:
        json.dump(manifest, f, indent=2)
        f.write("\n")


def transfer(path, n_out=3, g=12.0, bias=1e-8):
    # Invented sweep of the input of output 0 from 1 nA to 100 nA while the others sit at 10 nA,
    # shaped with the power-law normaliser I_b I_k^g / sum_j I_j^g (DEVELOPERS.md model notes section 4).
    with open(path, "w", newline="") as f:
        wr = csv.writer(f, lineterminator="\n")
        wr.writerow(["x"] + [f"out_{k}" for k in range(n_out)] + [f"share_{k}" for k in range(n_out)])
        for i in range(41):
            x = 1e-9 * 10 ** (2 * i / 40)
            ins = [x] + [1e-8 * (1 + 0.05 * k) for k in range(1, n_out)]
            powers = [v ** g for v in ins]
            tot = sum(powers)
            shares = [p / tot for p in powers]
            wr.writerow([r(x)] + [r(bias * s) for s in shares] + [r(s) for s in shares])


write("complete", 6, "complete")
rng = random.Random(20261202)
write("partial", 4, "partial")
transfer("transfer_wta.csv")
