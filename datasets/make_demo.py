#!/usr/bin/python3
"""Generate the invented parcel-delivery demo data for groupfit.

Writes datasets/deliveries.csv and datasets/depots.csv next to this file.
Uses only the Python standard library and a fixed seed, so every run
produces byte-identical files.

    /usr/bin/python3 datasets/make_demo.py

All names and numbers below are invented for demonstration only.
"""

import csv
import os
import random

SEED = 20261201
OUT_DIR = os.path.dirname(os.path.abspath(__file__))

# ---------------------------------------------------------------------------
# Invented scenario parameters
# ---------------------------------------------------------------------------

BASE_MINUTES = 14.0
DISTANCE_SLOPE = 1.6   # minutes per km
WEIGHT_SLOPE = 0.9     # minutes per kg

# carrier: (row count, carrier effect in minutes, noise SD,
#           mean distance km, SD distance km,
#           shift probabilities early/day/late)
CARRIERS = [
    ("amberpost",  700,  0.0,  9.0, 12.0, 6.0, (0.30, 0.50, 0.20)),
    ("brightcart", 550,  0.5, 10.5, 14.0, 6.5, (0.25, 0.50, 0.25)),
    ("copperfox",  450,  4.0,  8.0, 10.0, 5.0, (0.40, 0.45, 0.15)),
    ("driftwing",  400, -2.5, 13.5, 18.0, 7.5, (0.20, 0.40, 0.40)),
    ("emberline",  300, -1.0, 12.0, 22.0, 8.0, (0.25, 0.35, 0.40)),
]

SHIFTS = ["early", "day", "late"]
SHIFT_EFFECT = {"early": -2.0, "day": 0.0, "late": 4.5}

# small carrier x shift interaction (cells not listed are 0)
INTERACTION = {
    ("copperfox", "late"): 2.0,
    ("driftwing", "early"): -1.5,
    ("emberline", "late"): -1.5,
    ("brightcart", "early"): 1.0,
}

# depot_id: (depot_name, region, depot effect in minutes, sampling weight)
DEPOTS = {
    1: ("Harrowgate Yard",   "Fenward",    -1.5, 16),
    2: ("Ostley Cross",      "Fenward",     0.5, 12),
    3: ("Pellmoor Sheds",    "Fenward",     2.0,  9),
    4: ("Quayhaven Dock",    "Saltreach",  -0.5, 15),
    5: ("Wrenfield Annex",   "Saltreach",   3.0, 10),
    6: ("Tollbury Works",    "Saltreach",  -2.5, 13),
    7: ("Cindervale Depot",  "Upper Marl",  1.0, 14),
    8: ("Brockwell Point",   "Upper Marl",  3.5, 11),
}

N_MISSING_WEIGHT = 24   # about 1 %
N_MISSING_MINUTES = 12  # about 0.5 %
N_MISSING_CARRIER = 7   # about 0.3 %


def weighted_pick(rng, items, weights):
    """Pick one item with the given weights using only rng.random()."""
    total = float(sum(weights))
    u = rng.random() * total
    acc = 0.0
    for item, w in zip(items, weights):
        acc += w
        if u < acc:
            return item
    return items[-1]


def bounded_gauss(rng, mu, sd, lo, hi):
    """Normal draw, redrawn until it lies inside [lo, hi]."""
    while True:
        x = rng.gauss(mu, sd)
        if lo <= x <= hi:
            return x


def bounded_weight(rng):
    """Right-skewed parcel weight in [0.2, 25] kg (shifted exponential)."""
    while True:
        x = 0.2 + rng.expovariate(1.0 / 4.5)
        if x <= 25.0:
            return x


def main():
    rng = random.Random(SEED)

    # Exact, unbalanced carrier counts in a shuffled order.
    carrier_seq = []
    for name, count, *_ in CARRIERS:
        carrier_seq.extend([name] * count)
    rng.shuffle(carrier_seq)
    params = {c[0]: c for c in CARRIERS}

    depot_ids = sorted(DEPOTS)
    depot_weights = [DEPOTS[d][3] for d in depot_ids]

    rows = []
    for i, carrier in enumerate(carrier_seq, start=1):
        _, _, c_eff, noise_sd, d_mu, d_sd, shift_p = params[carrier]
        shift = weighted_pick(rng, SHIFTS, shift_p)
        depot = weighted_pick(rng, depot_ids, depot_weights)
        distance = bounded_gauss(rng, d_mu, d_sd, 1.0, 40.0)
        weight = bounded_weight(rng)
        # Use the values as they will be written, so the model holds exactly
        # for the stored (rounded) covariates.
        distance = float(f"{distance:.2f}")
        weight = float(f"{weight:.2f}")
        mean = (BASE_MINUTES + c_eff + SHIFT_EFFECT[shift]
                + INTERACTION.get((carrier, shift), 0.0)
                + DISTANCE_SLOPE * distance + WEIGHT_SLOPE * weight
                + DEPOTS[depot][2])
        # Redraw the (rare) noise values that would give an implausibly
        # short delivery.
        while True:
            minutes = mean + rng.gauss(0.0, noise_sd)
            if minutes >= 5.0:
                break
        rows.append({
            "delivery_id": i,
            "depot_id": depot,
            "carrier": carrier,
            "shift": shift,
            "distance_km": f"{distance:.2f}",
            "weight_kg": f"{weight:.2f}",
            "minutes": f"{minutes:.1f}",
        })

    # Blank out a few cells to demonstrate row accounting (NULLs in SQL).
    n = len(rows)
    for column, k in (("weight_kg", N_MISSING_WEIGHT),
                      ("minutes", N_MISSING_MINUTES),
                      ("carrier", N_MISSING_CARRIER)):
        idx = list(range(n))
        rng.shuffle(idx)
        for j in idx[:k]:
            rows[j][column] = ""

    header = ["delivery_id", "depot_id", "carrier", "shift",
              "distance_km", "weight_kg", "minutes"]
    with open(os.path.join(OUT_DIR, "deliveries.csv"), "w",
              newline="", encoding="utf-8") as f:
        w = csv.DictWriter(f, fieldnames=header, lineterminator="\n")
        w.writeheader()
        w.writerows(rows)

    with open(os.path.join(OUT_DIR, "depots.csv"), "w",
              newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["depot_id", "depot_name", "region"])
        for d in depot_ids:
            w.writerow([d, DEPOTS[d][0], DEPOTS[d][1]])

    print(f"wrote {n} deliveries and {len(depot_ids)} depots to {OUT_DIR}")


if __name__ == "__main__":
    main()
