"""sheetnet's own xlsx reader and row writer against the libraries' public APIs, on the same workbook.

sheetnet keeps two hand-written pieces of xlsx handling; each must earn its place against the
library it replaces (ratios below 1 favour sheetnet's code):

1. Reading: ``sheetnet.xlsx.reader.read_workbook`` (formulas and cached values in one pass, shared
   formulas expanded) against openpyxl in read-only mode, which needs two passes for the same
   information (``data_only=False`` for formulas, ``data_only=True`` for cached values).
2. Writing: the row writer (``write_entries(..., ordered=True)``, one XML string per row) against
   XlsxWriter's public ``write_formula`` / ``write_number`` / ``write_string``, both in constant-memory
   mode (so memory is flat for both), writing the same cells with the same formats and cached values.

Each side runs in its own process (best of three), so a reader's peak memory is its own.

Run: python benchmarks/bench_io.py [cells]    (default 400000 formula cells)
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROWS = 200
PER_ROW = 56  # formula cells per record row of the 4-3-1 network with batch size 1, scoring included


def _plan(cells: int):
    sys.path.insert(0, str(Path(__file__).parent))
    from bench_build import _table

    from sheetnet import api
    from sheetnet.book.sizing import Requested

    epochs = max(1, round(cells / (ROWS * PER_ROW)))
    plan, _ = api.plan_from_data(_table(ROWS), "label", Requested(), 10**8, holdout=0.0, hidden=(3,),
                                 epochs=epochs, batch_size=1, seed=0)
    return plan


def make(path: Path, cells: int) -> int:
    from sheetnet.book.build import write_workbook

    plan = _plan(cells)
    return write_workbook(plan.spec, plan.inputs, path, max_cells=10**8).formula_cells


def read_sheetnet(path: Path) -> int:
    from sheetnet.xlsx.reader import read_workbook

    book = read_workbook(path)
    return sum(len(sheet.formulas) for sheet in book.sheets.values())


def read_openpyxl(path: Path) -> int:
    import openpyxl

    formulas = 0
    for data_only in (False, True):
        book = openpyxl.load_workbook(path, read_only=True, data_only=data_only)
        for sheet in book.worksheets:
            for row in sheet.iter_rows():
                for cell in row:
                    if not data_only and isinstance(cell.value, str) and cell.value.startswith("="):
                        formulas += 1
        book.close()
    return formulas


def _entries(cells: int):
    """The Training record's cells, the largest sheet, in writing order."""
    from sheetnet.book import plan as sheet_plan
    from sheetnet.book.expected import expected_numbers
    from sheetnet.book.layout import RECORD, build_layout

    plan = _plan(cells)
    layout = build_layout(plan.spec)
    numbers = expected_numbers(plan.spec, plan.inputs)
    return [entry for sheet, entry in sheet_plan.all_entries(layout, numbers) if sheet == RECORD]


def write_rows(path: Path, entries) -> None:
    import xlsxwriter

    from sheetnet.book.write import _formats, _Sheet, write_entries

    book = xlsxwriter.Workbook(str(path), {"constant_memory": True})
    sheet = book.add_worksheet("record", worksheet_class=_Sheet)
    write_entries(sheet, [e for e in entries if not e.note], _formats(book), ordered=True)
    book.close()


def write_public(path: Path, entries) -> None:
    import xlsxwriter

    from sheetnet.book.write import _formats

    book = xlsxwriter.Workbook(str(path), {"constant_memory": True})
    sheet = book.add_worksheet("record")
    formats = _formats(book)
    for e in entries:
        if e.note:
            continue
        fmt = formats[e.role, e.style] if e.style else formats[e.role]
        if e.role == "formula":
            sheet.write_formula(e.row, e.col, e.content, fmt, e.value)
        elif isinstance(e.content, str):
            sheet.write_string(e.row, e.col, e.content, fmt)
        else:
            sheet.write_number(e.row, e.col, e.content, fmt)
    book.close()


def child(task: str, path: str, cells: int) -> dict:
    if task.startswith("read"):
        run = {"read_sheetnet": read_sheetnet, "read_openpyxl": read_openpyxl}[task]
        times = []
        for _ in range(3):
            start = time.perf_counter()
            count = run(Path(path))
            times.append(time.perf_counter() - start)
    else:
        entries = _entries(cells)
        run = {"write_rows": write_rows, "write_public": write_public}[task]
        times = []
        for n in range(3):
            start = time.perf_counter()
            run(Path(path).with_name(f"{task}{n}.xlsx"), entries)
            times.append(time.perf_counter() - start)
        count = sum(e.role == "formula" for e in entries)
        return {"seconds": min(times), "count": count}
    return {"seconds": min(times), "count": count, "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def _run(task: str, path: Path, cells: int) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", task, str(path), str(cells)], check=True,
                         capture_output=True, text=True).stdout
    return json.loads(out.strip().splitlines()[-1])


def main() -> None:
    cells = int(sys.argv[1]) if len(sys.argv) > 1 else 400_000
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "book.xlsx"
        written = make(path, cells)
        size = path.stat().st_size / 1e6
        print(f"workbook: {written:,} formula cells, {size:.1f} MB")
        ours, theirs = _run("read_sheetnet", path, cells), _run("read_openpyxl", path, cells)
        print(f"read   sheetnet {ours['seconds']:6.2f} s {ours['peak_mb']:6.0f} MB | openpyxl read-only (formulas + "
              f"values) {theirs['seconds']:6.2f} s {theirs['peak_mb']:6.0f} MB | time ratio "
              f"{ours['seconds'] / theirs['seconds']:.2f}")
        ours, theirs = _run("write_rows", path, cells), _run("write_public", path, cells)
        print(f"write  row writer {ours['seconds']:6.2f} s | XlsxWriter public API {theirs['seconds']:6.2f} s "
              f"(both in constant-memory mode) | time ratio "
              f"{ours['seconds'] / theirs['seconds']:.2f} ({ours['count']:,} formula cells of the record)")


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        print(json.dumps(child(sys.argv[2], sys.argv[3], int(sys.argv[4]))))
    else:
        main()
