"""Generate the demo's invented data set for plans/dusk-sleep.yaml (seeded: same bytes always).

Usage: python plans/make_demo_data.py OUT.csv [--rows N] [--seed N]
"""

from __future__ import annotations

import argparse
import csv
from pathlib import Path

import numpy as np

DISTRICTS = ["harbour", "hillside", "market", "riverside"]
GUIDANCE = ["none", "leaflet", "coached"]


def generate(rows: int, seed: int) -> list[dict[str, str]]:
    rng = np.random.default_rng(seed)
    guidance = rng.permutation(np.resize(np.arange(3), rows))
    age = np.where(rng.random(rows) < 0.02, rng.uniform(16, 18, rows), rng.uniform(20, 82, rows))
    night_shift = (rng.random(rows) < 0.22).astype(int)
    district = rng.choice(4, size=rows, p=[0.3, 0.2, 0.3, 0.2])
    screen = np.clip(rng.gamma(4.0, 0.7, rows), 0, 12)
    coffee = rng.poisson(1.8, rows)
    latency_w0 = np.clip(rng.normal(44 + 5 * night_shift, 11), 5, 200)
    sessions = rng.integers(0, 7, rows)  # every arm has diary check-in sessions
    effect = np.array([0.0, -2.5, -7.0])[guidance]
    mean_w8 = (8 + 0.62 * latency_w0 + 0.08 * age + 0.004 * (age - 50) ** 2 + 5.5 * night_shift
               + np.array([0.0, 1.5, -1.0, 2.0])[district] + 1.1 * screen + effect)
    latency_w8 = np.clip(mean_w8 + rng.normal(0, 7.5 + 0.08 * mean_w8), 1, 240)
    diary = rng.integers(10, 29, rows)
    rate = np.exp(-1.2 + 0.008 * age + 0.35 * night_shift + 0.06 * coffee
                  + np.array([0.0, -0.05, -0.25])[guidance])
    awakenings = rng.poisson(rate * diary)

    w8_missing = rng.random(rows) < 0.07
    screen_missing = rng.random(rows) < 0.04
    out = []
    for i in range(rows):
        out.append({
            "sleeper_id": f"DS-{i + 1:04d}",
            "guidance": GUIDANCE[guidance[i]],
            "age": f"{age[i]:.1f}",
            "night_shift": str(night_shift[i]),
            "district": DISTRICTS[district[i]],
            "screen_hours": "NA" if screen_missing[i] else f"{screen[i]:.1f}",
            "coffee_cups": str(coffee[i]),
            "sessions_attended": str(sessions[i]),
            "latency_w0": f"{latency_w0[i]:.1f}",
            "latency_w8": "" if w8_missing[i] else f"{latency_w8[i]:.1f}",
            "settled": "" if w8_missing[i] else str(int(latency_w8[i] < 30)),
            "awakenings": str(awakenings[i]),
            "diary_nights": str(diary[i]),
        })
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out")
    parser.add_argument("--rows", type=int, default=600)
    parser.add_argument("--seed", type=int, default=20261202)
    args = parser.parse_args()
    records = generate(args.rows, args.seed)
    path = Path(args.out)
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("w", newline="", encoding="utf-8") as f:
        writer = csv.DictWriter(f, fieldnames=list(records[0]), lineterminator="\n")
        writer.writeheader()
        writer.writerows(records)
    print(f"wrote {len(records)} invented rows to {path}")


if __name__ == "__main__":
    main()
