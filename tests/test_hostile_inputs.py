"""Hostile and broken inputs across every command: a clear one-line message naming the problem and
where it is, a non-zero exit code, no traceback, inputs byte-identical, no output file left behind.
Every bad file is generated here (none is committed)."""

from __future__ import annotations

import hashlib
import json
import zipfile
from pathlib import Path

import pytest

from sheetnet.cli import main
from tests.conftest import write_csv

GOOD_ROWS = [[0.1 * i, (i * 7 % 5) / 5, "yes" if i % 3 else "no"] for i in range(12)]


@pytest.fixture(scope="module")
def assets(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("assets")
    data = write_csv(folder / "good.csv", ["a", "b", "label"], GOOD_ROWS)
    assert main(["train", str(data), "--target", "label", "--epochs", "2", "-o", str(folder / "model.json")]) == 0
    assert main(["build", str(data), "--target", "label", "--epochs", "1", "-o", str(folder / "book.xlsx")]) == 0
    return {"data": data, "model": folder / "model.json", "book": folder / "book.xlsx"}


def _zip(path: Path, parts: dict[str, bytes | str]) -> Path:
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, data in parts.items():
            zf.writestr(name, data)
    return path


def _with_part(book: Path, out: Path, name: str, data: bytes | str, replace: bool = True) -> Path:
    with zipfile.ZipFile(book) as src, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            if item.filename == name and replace:
                continue
            dst.writestr(item, src.read(item.filename))
        dst.writestr(name, data)
    return out


BOMB_XML = ('<?xml version="1.0"?><!DOCTYPE lolz [<!ENTITY lol "lol"><!ENTITY lol2 "&lol;&lol;&lol;&lol;&lol;">'
            '<!ENTITY lol3 "&lol2;&lol2;&lol2;&lol2;&lol2;">]><worksheet xmlns="http://schemas.openxmlformats.org/'
            'spreadsheetml/2006/main"><sheetData><row r="1"><c r="A1" t="inlineStr"><is><t>&lol3;</t></is></c>'
            '</row></sheetData></worksheet>')


def bad_workbooks(tmp: Path, book: Path) -> dict[str, tuple[Path, str]]:
    """name -> (file, words the message must contain)."""
    out = {
        "not a zip": ((tmp / "text.xlsx"), "not an .xlsx workbook"),
        "empty file": ((tmp / "empty.xlsx"), "not an .xlsx workbook"),
        "encrypted or legacy": ((tmp / "ole.xlsx"), "encrypted"),
        "truncated zip": ((tmp / "truncated.xlsx"), "not an .xlsx workbook"),
        "zip without workbook": (_zip(tmp / "nowb.xlsx", {"hello.txt": "hi"}), "xl/workbook.xml"),
        "xlsb": ((tmp / "book.xlsb"), "xlsb"),
        "entity expansion": (_with_part(book, tmp / "bomb.xlsx", "xl/worksheets/sheet3.xml", BOMB_XML),
                             "document type"),
        "zip bomb": (_with_part(book, tmp / "zipbomb.xlsx", "xl/media/zeros.bin", b"\0" * (40 * 1024 * 1024),
                                replace=False), "zip bomb"),
        "macros": (_with_part(book, tmp / "macro.xlsx", "xl/vbaProject.bin", b"\0\1\2", replace=False), "macro"),
        "xlsm": ((tmp / "book.xlsm"), "macro-enabled"),
        "plain workbook": (_zip(tmp / "plain.xlsx", {}), ""),
        "damaged layout": (_with_part(book, tmp / "layout.xlsx", "xl/worksheets/sheet8.xml",
                                      '<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
                                      '<sheetData><row r="2"><c r="A2" t="inlineStr"><is><t>{oops</t></is></c></row>'
                                      '</sheetData></worksheet>'), "layout description"),
        "folder": ((tmp / "folder.xlsx"), "folder"),
    }
    out["not a zip"][0].write_text("hello")
    out["empty file"][0].write_bytes(b"")
    out["encrypted or legacy"][0].write_bytes(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\0" * 512)
    out["truncated zip"][0].write_bytes(book.read_bytes()[:700])
    out["xlsb"][0].write_bytes(book.read_bytes())
    out["xlsm"][0].write_bytes(book.read_bytes())
    out["folder"][0].mkdir()
    import openpyxl

    wb = openpyxl.Workbook()
    wb.active["A1"] = 1
    wb.save(out["plain workbook"][0])
    out["plain workbook"] = (out["plain workbook"][0], "not a sheetnet workbook")
    return out


BAD_WORKBOOK_NAMES = ["not a zip", "empty file", "encrypted or legacy", "truncated zip", "zip without workbook",
                      "xlsb", "entity expansion", "zip bomb", "macros", "xlsm", "plain workbook", "damaged layout",
                      "folder"]


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.is_file() else "dir"


def _run(capsys, args: list) -> tuple[int, str]:
    code = main([str(a) for a in args])
    captured = capsys.readouterr()
    return code, captured.err


def _check(capsys, args, inputs, outputs, needle, codes=(1, 2)) -> None:
    before = {p: _digest(p) for p in inputs}
    code, err = _run(capsys, args)
    assert code in codes, (args, code, err)
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("sheetnet: error:"), err
    assert "Traceback" not in err and needle.lower() in err.lower(), err
    assert {p: _digest(p) for p in inputs} == before
    for out in outputs:
        assert not out.exists(), out
        assert not list(out.parent.glob(f".{out.name}.*.tmp"))


@pytest.mark.parametrize("case", BAD_WORKBOOK_NAMES)
@pytest.mark.parametrize("command", ["verify", "audit", "extract"])
def test_bad_workbooks_are_refused(case, command, assets, tmp_path, capsys):
    path, needle = bad_workbooks(tmp_path, assets["book"])[case]
    if command == "audit" and case in ("macros", "xlsm"):
        code, _ = _run(capsys, ["audit", path])  # the audit reads it and reports the macros as a risk
        assert code == 3
        return
    if command == "audit" and case == "damaged layout":  # a damaged description is the audit's finding
        code, out = main(["audit", str(path)]), capsys.readouterr().out
        assert code == 3 and "Layout description (" in out and "not valid JSON" in out, out
        return
    out = tmp_path / "out.json"
    args = {"verify": ["verify", path, "--json", out], "audit": ["audit", path, "--json", out],
            "extract": ["extract", path, "-o", out]}[command]
    if command == "verify":  # the report says why, with the verdict cannot-verify
        _check(capsys, args, [path] if path.is_file() else [], [], needle)
        report = json.loads(out.read_text())
        assert report["verdict"] == "cannot-verify" and needle.lower() in report["reason"].lower()
        return
    _check(capsys, args, [path] if path.is_file() else [], [out], needle)


BAD_MODELS = {
    "not json": ("{oops", "not valid JSON"),
    "wrong format": ('{"format": "other", "version": 1}', "format"),
    "shape": ('{"format": "sheetnet-model", "version": 1, "inputs": ["a", "b"], "outputs": ["label"], '
              '"layers": [{"weights": [[1, 2, 3]], "bias": [0], "activation": "sigmoid"}]}', "layers[0].weights[0]"),
    "nan": ('{"format": "sheetnet-model", "version": 1, "inputs": ["a", "b"], "outputs": ["label"], '
            '"layers": [{"weights": [[1, NaN]], "bias": [0], "activation": "sigmoid"}]}', "non-finite"),
    "unknown activation": ('{"format": "sheetnet-model", "version": 1, "inputs": ["a", "b"], "outputs": ["label"], '
                           '"layers": [{"weights": [[1, 2]], "bias": [0], "activation": "gelu"}]}', "activation"),
    "missing input column": ('{"format": "sheetnet-model", "version": 1, "inputs": ["a", "zz"], "outputs": ["y"], '
                             '"layers": [{"weights": [[1, 2]], "bias": [0], "activation": "sigmoid"}]}', "zz"),
}


@pytest.mark.parametrize("case", sorted(BAD_MODELS))
@pytest.mark.parametrize("command", ["score", "build"])
def test_bad_model_files_are_refused(case, command, assets, tmp_path, capsys):
    text, needle = BAD_MODELS[case]
    model = tmp_path / "m.json"
    model.write_text(text)
    out = tmp_path / ("out.csv" if command == "score" else "out.xlsx")
    args = ["score", model, assets["data"], "-o", out] if command == "score" else \
        ["build", "--model", model, assets["data"], "-o", out]
    _check(capsys, args, [model, assets["data"]], [out], needle)


BAD_CSV = {
    "latin-1": ("a,b,label\n1,2,caf\xe9\n".encode("latin-1"), "UTF-8"),
    "nan feature": (b"a,b,label\n1,nan,yes\n2,3,no\n", "line 2, column 'b'"),
    "inf feature": (b"a,b,label\n1,-inf,yes\n2,3,no\n", "line 2, column 'b'"),
    "huge values": (b"a,b,label\n1e308,1,yes\n-1e308,2,no\n1e308,3,yes\n", "too large"),
    "duplicate header": (b"a,a,label\n1,2,yes\n", "duplicate column"),
    "empty header cell": (b"a,,label\n1,2,yes\n", "empty header"),
    "ragged": (b"a,b,label\n1,2,yes\n1,2\n", "line 3"),
    "header only": (b"a;b;label\n", "no data rows"),
    "binary junk": (bytes(range(256)) * 4, "UTF-8"),
    "one class": (b"a\tb\tlabel\n1\t2\tyes\n3\t4\tyes\n", "only one class"),
}


@pytest.mark.parametrize("case", sorted(BAD_CSV))
@pytest.mark.parametrize("command", ["train", "build", "score"])
def test_bad_csv_files_are_refused(case, command, assets, tmp_path, capsys):
    data, needle = BAD_CSV[case]
    path = tmp_path / "bad.csv"
    path.write_bytes(data)
    if command == "score" and case in ("one class", "huge values"):
        return  # scoring needs no classes, and scores huge (finite) values without trouble
    out = tmp_path / ("out.json" if command == "train" else "out.xlsx" if command == "build" else "out.csv")
    args = {"train": ["train", path, "--target", "label", "-o", out],
            "build": ["build", path, "--target", "label", "-o", out],
            "score": ["score", assets["model"], path, "-o", out]}[command]
    _check(capsys, args, [path, assets["model"]], [out], needle)


def test_existing_output_is_kept_without_force(assets, tmp_path, capsys):
    for command, out in (("verify", tmp_path / "r.json"), ("audit", tmp_path / "a.json")):
        out.write_text("keep")
        code, err = _run(capsys, [command, assets["book"], "--json", out])
        assert code == 2 and "--force" in err and out.read_text() == "keep"
    out = tmp_path / "m.json"
    out.write_text("keep")
    code, err = _run(capsys, ["extract", assets["book"], "-o", out])
    assert code == 2 and out.read_text() == "keep"


def test_outputs_never_overwrite_inputs(assets, capsys):
    before = _digest(assets["book"])
    for args in (["extract", assets["book"], "-o", assets["book"], "--force"],
                 ["audit", assets["book"], "--annotate", assets["book"], "--force"],
                 ["verify", assets["book"], "--json", assets["book"], "--force"]):
        code, err = _run(capsys, args)
        assert code == 2 and "overwrite the input" in err
    assert _digest(assets["book"]) == before
