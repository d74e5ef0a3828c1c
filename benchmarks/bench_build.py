"""Workbook build time and memory against openpyxl write-only mode writing the same number of plain
formula strings, in the same process. Sizes: records of about 10k, 100k and 1M formula cells.

Each size runs in a fresh child process so its peak memory (ru_maxrss) is its own. Prints the build time
(reference numbers + formula text + XlsxWriter), the baseline time, their ratio (target <= 1.5) and the
child's peak resident memory (target < 500 MB at 1M cells). Run: python benchmarks/bench_build.py [sizes...]
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

SIZES = {"10k": 10_000, "100k": 100_000, "1M": 1_000_000}


def _table(rows: int):
    from sheetnet.net.data import DataTable

    rng = np.random.default_rng(1)
    x = rng.normal(size=(rows, 4)).round(4)
    label = np.where(x[:, 0] * x[:, 1] + x[:, 2] > 0, "yes", "no")
    body = tuple((*(repr(float(v)) for v in row), lab) for row, lab in zip(x, label, strict=True))
    return DataTable(source="bench.csv", header=("a", "b", "c", "d", "label"), rows=body,
                 lines=tuple(range(2, rows + 2)))


def child(target: int) -> dict:
    from sheetnet.book.build import from_fit, write_workbook
    from sheetnet.book.sizing import Requested
    from sheetnet.net.fit import Architecture, fit
    from sheetnet.net.train import TrainSettings

    rows = 200
    table = _table(rows)
    per_row = 56  # formula cells per record row for a 4-3-1 sigmoid network with batch size 1
    epochs = max(1, round(target / (rows * per_row)))
    settings = TrainSettings(learning_rate=0.1, epochs=epochs, batch_size=1, seed=0)
    outcome = fit(table, ("label",), settings, Architecture(hidden=(3,)), holdout=0.0)
    plan = from_fit(outcome, table, settings, Requested(), max_cells=10**8)
    spec, inputs = plan.spec, plan.inputs
    repeats = 3 if target < 500_000 else 1
    builds, bases = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for n in range(repeats):
            start = time.perf_counter()
            result = write_workbook(spec, inputs, Path(tmp) / f"b{n}.xlsx", max_cells=10**8)
            builds.append(time.perf_counter() - start)
            cells = result.formula_cells
            start = time.perf_counter()
            baseline(Path(tmp) / f"plain{n}.xlsx", cells, width=per_row)
            bases.append(time.perf_counter() - start)
    build, base = min(builds), min(bases)
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return {"cells": cells, "build": build, "baseline": base, "peak_mb": peak_mb}


def baseline(path: Path, cells: int, width: int) -> None:
    """openpyxl in write-only mode writing the same number of plain formula strings."""
    from openpyxl import Workbook

    book = Workbook(write_only=True)
    sheet = book.create_sheet("plain")
    full, rest = divmod(cells, width)
    row = [f"=A{r}*B{r}+C{r}" for r in range(1, width + 1)]
    for _ in range(full):
        sheet.append(row)
    if rest:
        sheet.append(row[:rest])
    book.save(path)


def main() -> None:
    if len(sys.argv) > 2 and sys.argv[1] == "--child":
        print(json.dumps(child(int(sys.argv[2]))))
        return
    wanted = sys.argv[1:] or list(SIZES)
    print(f"{'size':>5} {'formula cells':>14} {'build s':>8} {'openpyxl s':>10} {'ratio':>6} {'peak MB':>8}")
    for name in wanted:
        out = subprocess.run([sys.executable, __file__, "--child", str(SIZES[name])], capture_output=True, text=True,
                             check=True)
        r = json.loads(out.stdout.strip().splitlines()[-1])
        print(f"{name:>5} {r['cells']:>14,} {r['build']:>8.2f} {r['baseline']:>10.2f} "
              f"{r['build'] / r['baseline']:>6.2f} {r['peak_mb']:>8.0f}")


if __name__ == "__main__":
    main()
