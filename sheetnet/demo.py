"""Invented demo data and the demo workbook.

The scenario is made up: a fictional pottery studio logs kiln firings and wants a small
network that says, before the kiln is opened, whether a glaze firing is likely to come out
flawless. No real studio, person, firm or product is described; every number comes from the
seeded generator below.
"""

from __future__ import annotations

import csv
import io

import numpy as np

INVENTED_NOTE = "INVENTED DATA for the sheetnet demo: a fictional pottery studio's kiln firings (seeded generator)."
DEMO_SEED = 2026
DEMO_ROWS = 120
HEADER = ("kiln_peak_c", "ramp_c_per_hour", "glaze_mm", "humidity_pct", "outcome")

#: The training run the demo workbook shows (the record replays its first epochs).
DEMO_FLAGS = ("--target", "outcome", "--hidden", "3", "--lr", "0.5", "--epochs", "60", "--batch-size", "8",
              "--seed", "7", "--trace-epochs", "6")


def firings(rows: int = DEMO_ROWS, seed: int = DEMO_SEED) -> list[tuple]:
    """Invented firings: a glaze is flawless near the right peak temperature, with a moderate
    ramp, a glaze that is neither too thin nor too thick, and not too humid a day."""
    rng = np.random.default_rng(seed)
    peak = rng.uniform(1180, 1260, rows).round(0)
    ramp = rng.uniform(60, 220, rows).round(0)
    glaze = rng.uniform(0.3, 1.4, rows).round(2)
    humidity = rng.uniform(25, 85, rows).round(0)
    score = (-((peak - 1222) / 18) ** 2 - ((glaze - 0.8) / 0.3) ** 2 - (ramp - 120) / 60 - (humidity - 50) / 25 + 1.6)
    flawless = score + rng.normal(0, 0.6, rows) > 0
    return [(int(p), int(r), float(g), int(h), "flawless" if f else "flawed")
            for p, r, g, h, f in zip(peak, ramp, glaze, humidity, flawless, strict=True)]


def demo_csv_text() -> str:
    """The demo data as CSV text, with a comment line saying it is invented."""
    out = io.StringIO()
    out.write(f"# {INVENTED_NOTE}\n")
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(HEADER)
    writer.writerows(firings())
    return out.getvalue()
