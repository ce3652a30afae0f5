#!/usr/bin/env python3
"""Generate hive_buzz_demo.csv: INVENTED demo data for the hardmax quickstart.

Scenario (fictional): a battery-powered hive monitor classifies the buzz spectrum of a bee colony
into three states -- calm, foraging, swarm_prep -- from eight band energies (arbitrary units).
Nothing here is measured; the numbers come from the seeded generator below and only serve to
show the workflow. Accuracy claims in hardmax use the open datasets (iris, wine, digits).

Re-create with:  python3 datasets/demo/make_hive_demo.py > datasets/demo/hive_buzz_demo.csv
"""
import math
import random

rng = random.Random(20261202)
bands = [f"band_{f}hz" for f in (125, 190, 250, 320, 400, 500, 640, 800)]
# Invented class centres (band energy, arbitrary units) and spreads.
centres = {
    "calm":       [2.0, 3.0, 5.0, 4.0, 2.5, 1.5, 1.0, 0.8],
    "foraging":   [2.5, 3.5, 4.0, 5.5, 4.5, 2.5, 1.5, 1.0],
    "swarm_prep": [2.2, 4.5, 4.5, 4.5, 5.0, 4.0, 2.5, 1.6],
}
print(",".join(bands + ["label"]))
for label, c in centres.items():
    for _ in range(120):
        common = rng.gauss(0.0, 0.35)  # loudness shared by all bands
        row = [max(0.0, m * math.exp(common) + rng.gauss(0.0, 0.6)) for m in c]
        print(",".join(f"{v:.3f}" for v in row) + f",{label}")
