"""Edit a workbook inside LibreOffice, as a person does, through its Python bridge (UNO).

LibreOffice shifts references when rows are inserted, moves defined names with their cells, rewrites
references when a sheet is renamed, and saves with its own spelling of numbers and formulas: edits
made with openpyxl do none of that. The UNO bridge binds to the system Python (Debian's
``python3-uno``), so the tests call :func:`edit_in_libreoffice`, which runs this file as a script
under that interpreter.

Operations (a list of dicts; rows and columns 0-based):
  {"op": "value", "sheet": S, "cell": "B3", "value": 0.5}        type a number
  {"op": "text", "sheet": S, "cell": "B3", "text": "abc"}         type text
  {"op": "formula", "sheet": S, "cell": "B3", "formula": "=1+1"}  type a formula
  {"op": "clear", "sheet": S, "cell": "B3"}                       delete the content
  {"op": "insert_rows" | "delete_rows", "sheet": S, "at": 5, "count": 1}
  {"op": "insert_columns" | "delete_columns", "sheet": S, "at": 2, "count": 1}
  {"op": "rename", "sheet": S, "to": "New name"}
  {"op": "sort", "sheet": S, "range": "A15:K134", "column": 3, "descending": true}
  {"op": "move", "sheet": S, "range": "B12:F14", "to": "H30"}    cut and paste a block ("to_sheet": another)
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

SYSTEM_PYTHON = "/usr/bin/python3"


def libreoffice_bridge_available() -> bool:
    """soffice and the UNO bridge of the system Python are both installed."""
    if shutil.which("soffice") is None or not Path(SYSTEM_PYTHON).exists():
        return False
    probe = subprocess.run([SYSTEM_PYTHON, "-c", "import uno"], capture_output=True)
    return probe.returncode == 0


def edit_in_libreoffice(source: Path, target: Path, operations: list[dict], timeout: float = 300) -> Path:
    """Open ``source`` in LibreOffice, apply ``operations``, recalculate, save as ``target`` (.xlsx)."""
    with tempfile.TemporaryDirectory(prefix="sheetnet-lo-edit-") as work:
        ops = Path(work) / "ops.json"
        ops.write_text(json.dumps(operations))
        staged = Path(work) / "in" / "book.xlsx"  # LibreOffice locks what it opens: never the source itself
        staged.parent.mkdir()
        shutil.copyfile(source, staged)
        for _attempt in range(2):  # a start of soffice now and then fails on a busy machine: try once more
            result = subprocess.run([SYSTEM_PYTHON, __file__, str(ops), str(staged), str(Path(target).resolve()),
                                     work], capture_output=True, text=True, timeout=timeout)
            if result.returncode == 0 and Path(target).exists():
                break
    if result.returncode != 0 or not Path(target).exists():
        raise RuntimeError(f"LibreOffice edit failed: {result.stderr.strip()[-2000:]}")
    return Path(target)


# ---------------------------------------------------------------- the script (system Python, with uno)


def _connect(work: str):
    import uno

    pipe = f"sheetnet{os.getpid()}"
    profile = Path(work, "profile").as_uri()
    process = subprocess.Popen(["soffice", f"-env:UserInstallation={profile}", "--headless", "--invisible",
                                "--norestore", "--nolockcheck", "--nodefault",
                                f"--accept=pipe,name={pipe};urp;StarOffice.ComponentContext"],
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True,
                               env={**os.environ, "HOME": work})
    local = uno.getComponentContext()
    resolver = local.ServiceManager.createInstanceWithContext("com.sun.star.bridge.UnoUrlResolver", local)
    for _ in range(600):
        try:
            context = resolver.resolve(f"uno:pipe,name={pipe};urp;StarOffice.ComponentContext")
            break
        except Exception:
            time.sleep(0.1)
    else:
        process.kill()
        raise RuntimeError("could not connect to LibreOffice")
    desktop = context.ServiceManager.createInstanceWithContext("com.sun.star.frame.Desktop", context)
    return process, desktop


def _prop(name: str, value):
    from com.sun.star.beans import PropertyValue

    prop = PropertyValue()
    prop.Name, prop.Value = name, value
    return prop


def _apply(doc, op: dict) -> None:
    sheet = doc.Sheets.getByName(op["sheet"])
    kind = op["op"]
    if kind in ("value", "text", "formula", "clear"):
        cell = sheet.getCellRangeByName(op["cell"])
        if kind == "value":
            cell.setValue(float(op["value"]))
        elif kind == "text":
            cell.setString(op["text"])
        elif kind == "formula":
            cell.setFormula(op["formula"])
        else:
            cell.setString("")
    elif kind == "insert_rows":
        sheet.Rows.insertByIndex(op["at"], op.get("count", 1))
    elif kind == "delete_rows":
        sheet.Rows.removeByIndex(op["at"], op.get("count", 1))
    elif kind == "insert_columns":
        sheet.Columns.insertByIndex(op["at"], op.get("count", 1))
    elif kind == "delete_columns":
        sheet.Columns.removeByIndex(op["at"], op.get("count", 1))
    elif kind == "rename":
        sheet.setName(op["to"])
    elif kind == "move":
        source = sheet.getCellRangeByName(op["range"]).getRangeAddress()
        destination = doc.Sheets.getByName(op.get("to_sheet", op["sheet"]))
        sheet.moveRange(destination.getCellRangeByName(op["to"]).getCellAddress(), source)
    elif kind == "sort":
        _sort(sheet.getCellRangeByName(op["range"]), op["column"], op.get("descending", False))
    else:
        raise ValueError(f"unknown operation {kind!r}")


def _sort(cells, column: int, descending: bool) -> None:
    import uno
    from com.sun.star.table import TableSortField

    field = TableSortField()
    field.Field = column
    field.IsAscending = not descending
    descriptor = cells.createSortDescriptor()
    for prop in descriptor:
        if prop.Name == "SortFields":
            prop.Value = uno.Any("[]com.sun.star.table.TableSortField", (field,))
        elif prop.Name == "ContainsHeader":
            prop.Value = False
    cells.sort(descriptor)


def _main(ops_path: str, source: str, target: str, work: str) -> None:
    import uno

    operations = json.loads(Path(ops_path).read_text())
    process, desktop = _connect(work)
    try:
        doc = desktop.loadComponentFromURL(uno.systemPathToFileUrl(source), "_blank", 0, (_prop("Hidden", True),))
        for op in operations:
            _apply(doc, op)
        doc.calculateAll()
        doc.storeToURL(uno.systemPathToFileUrl(target), (_prop("FilterName", "Calc MS Excel 2007 XML"),))
        doc.close(True)
        with contextlib.suppress(Exception):
            desktop.terminate()
    finally:
        with contextlib.suppress(OSError):
            os.killpg(process.pid, 9)


if __name__ == "__main__":
    _main(*sys.argv[1:5])
