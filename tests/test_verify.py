"""sheetnet verify: passes on untouched files, names tampered cells exactly, survives a LibreOffice
round trip and files without cached values, and refuses what it cannot verify."""

from __future__ import annotations

import hashlib
import json
import re
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pytest

import sheetnet
from tests.conftest import write_csv
from tests.test_workbook import CONFIGS, build


@pytest.fixture
def book(tmp_path, run_cli) -> Path:
    return build(tmp_path, run_cli, *CONFIGS["softmax-ce-batch3-momentum-l2"])


def _verify(run_cli, path: Path, *flags) -> tuple[int, str, dict]:
    report = path.parent / f"{path.stem}.report.json"
    code, out, err = run_cli("verify", path, "--json", report, "--force", *flags)
    data = json.loads(report.read_text()) if report.exists() else {}
    return code, out + err, data


def test_untouched_workbook_verifies(book, run_cli):
    code, out, data = _verify(run_cli, book)
    assert code == 0, out
    assert data["ok"] and data["engine"] == "embedded" and data["cells_compared"] > 300
    assert data["max_abs_diff"] < 1e-12 and not data["mismatches"] and not data["errors"]
    assert not data["stale_cached"] and data["tolerance"] == 1e-9
    assert "verdict: OK" in out
    # the report names the exact bytes it speaks for (FIPS 180-4 SHA-256, via hashlib) and when
    assert data["file_sha256"] == hashlib.sha256(book.read_bytes()).hexdigest()
    assert data["file_bytes"] == book.stat().st_size and data["verified_at"].endswith("+00:00")
    extracted = sheetnet.extract_model(book)
    assert extracted.training["extracted_from_sha256"] == data["file_sha256"]


def _edit(book: Path, out: Path, edits) -> Path:
    wb = openpyxl.load_workbook(book)
    for sheet, cell, change in edits:
        wb[sheet][cell].value = change(wb[sheet][cell].value)
    wb.save(out)
    return out


def _first_formula(book: Path, sheet: str, header: str, offset: int = 3) -> str:
    ws = openpyxl.load_workbook(book)[sheet]
    for row in ws.iter_rows():
        for c in row:
            if c.value == header:
                return f"{c.column_letter}{c.row + offset}"
    raise AssertionError(header)


def test_tampered_cells_are_named_exactly(book, tmp_path, run_cli):
    z_cell = _first_formula(book, "Training record", "z h1_2", 4)
    a_cell = _first_formula(book, "Training record", "a h1_1", 2)
    scoring_cell = _first_formula(book, "Scoring", "z h1_1", 5)
    shift = lambda f: re.sub(r"([A-Z]+)(\d+)", lambda m: f"{m.group(1)}{int(m.group(2)) + 1}", f, count=1)  # noqa: E731
    edited = _edit(book, tmp_path / "edited.xlsx", [
        ("Training record", z_cell, lambda f: f.replace("+", "-", 1)),   # one operator changed
        ("Training record", a_cell, shift),                              # one reference shifted
        ("Scoring", scoring_cell, lambda f: 0.125),                      # a constant pasted over a formula
    ])
    code, out, data = _verify(run_cli, edited)
    assert code == 1 and not data["ok"]
    named = {(d["sheet"], d["cell"]) for d in data["formula_differences"]}
    assert named == {("Training record", z_cell), ("Training record", a_cell), ("Scoring", scoring_cell)}
    assert data["mismatch_count"] > 0
    assert z_cell in out and a_cell in out and scoring_cell in out


def test_input_edits_are_recomputed_not_flagged(book, tmp_path, run_cli):
    edited = _edit(book, tmp_path / "lr.xlsx", [("Training setup", "B3", lambda v: 0.77)])
    code, out, data = _verify(run_cli, edited)
    assert code == 0, out  # the reference is re-run with the learning rate the file holds now
    assert not data["stale_cached"]  # openpyxl saves no cached values: nothing can be stale


def test_stale_cached_value_is_reported(book, tmp_path, run_cli):
    stale = tmp_path / "stale.xlsx"
    with zipfile.ZipFile(book) as src, zipfile.ZipFile(stale, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            data = src.read(item.filename)
            if item.filename == "xl/worksheets/sheet3.xml":  # the Calculator sheet
                data = re.sub(rb"(<f>[^<]*</f><v>)[^<]*(</v>)", rb"\g<1>42\g<2>", data, count=1)
            dst.writestr(item, data)
    code, out, data = _verify(run_cli, stale)
    assert code == 4 and data["verdict"] == "stale" and data["ok"] is False
    assert data["stale_count"] == 1 and data["stale_cached"][0]["cached"] == 42.0
    assert data["stale_per_sheet"] == {"Calculator": 1}
    assert not data["formula_differences"] and not data["mismatch_count"]
    assert "verdict: STALE" in out and "(Calculator 1)" in out and "refreshes them" in out


@pytest.mark.parametrize("content", [b"not a zip at all", None])
def test_unverifiable_files_exit_2(content, tmp_path, run_cli):
    path = tmp_path / "x.xlsx"
    if content is None:
        wb = openpyxl.Workbook()
        wb.active["A1"] = "=1+1"
        wb.save(path)
    else:
        path.write_bytes(content)
    code, out, _ = _verify(run_cli, path)
    assert code == 2 and "cannot verify" in out and "Traceback" not in out
    assert len(out.strip().splitlines()) == 1


@pytest.mark.slow
@pytest.mark.libreoffice
def test_libreoffice_round_trip_still_verifies_with_both_engines(book, tmp_path, run_cli):
    from sheetnet.engines.libreoffice import recalculate

    saved = recalculate(book, tmp_path / "lo")
    code, out, data = _verify(run_cli, saved, "--engine", "both")
    assert code == 0, out
    assert data["engine"] == "both" and set(data["engines"]) == {"embedded", "libreoffice"}


@pytest.mark.slow
@pytest.mark.libreoffice
def test_saturated_network_verifies_without_errors(tmp_path, run_cli):
    big = 900.0
    model = {"format": "sheetnet-model", "version": 1, "inputs": ["s", "t"], "outputs": ["y"], "task": "binary",
             "loss": "cross-entropy", "classes": ["0", "1"], "target": ["y"],
             "layers": [{"weights": [[big, -big], [-big, big]], "bias": [0, 0], "activation": "sigmoid"},
                        {"weights": [[big, -big]], "bias": [0], "activation": "sigmoid"}]}
    (tmp_path / "m.json").write_text(json.dumps(model))
    data = write_csv(tmp_path / "d.csv", ["s", "t", "y"], [[1, -1, 1], [-1, 1, 0], [2, 0.5, 0], [0.001, 0, 1]])
    book = tmp_path / "sat.xlsx"
    assert run_cli("build", "--model", tmp_path / "m.json", data, "--epochs", "2", "-o", book)[0] == 0
    code, out, report = _verify(run_cli, book, "--engine", "both")
    assert code == 0, out
    assert not report["errors"]


def test_general_path_is_reported(book, tmp_path, run_cli):
    ws_cell = _first_formula(book, "Scoring", "loss", 1)
    edited = _edit(book, tmp_path / "round.xlsx", [("Scoring", ws_cell, lambda f: "=ROUND(" + f[1:] + ",20)")])
    code, _out, data = _verify(run_cli, edited)
    assert code == 1  # the formula is not what sheetnet writes ...
    assert [d["cell"] for d in data["formula_differences"]] == [ws_cell]
    # ... and it was evaluated by the general path (as is the Calculator's warning, which uses ISNUMBER)
    assert f"Scoring!{ws_cell}" in data["general_path_cells"] and len(data["general_path_cells"]) <= 2
    assert data["mismatch_count"] == 0  # ROUND(x, 20) leaves the value unchanged


@pytest.mark.parametrize("loader", ["load_iris", "load_diabetes"])
def test_workbooks_from_open_data_verify(loader, tmp_path, run_cli):
    import sklearn.datasets

    # Data: scikit-learn's bundled sets (iris: Fisher 1936; diabetes: Efron et al. 2004, "Least Angle
    # Regression", Annals of Statistics 32(2), per the loader's DESCR, from memory).
    frame = getattr(sklearn.datasets, loader)(as_frame=True).frame.sample(60, random_state=1)
    if loader == "load_iris":
        frame["target"] = frame["target"].map({0: "setosa", 1: "versicolor", 2: "virginica"})
    data = tmp_path / "d.csv"
    frame.to_csv(data, index=False)
    book = tmp_path / "b.xlsx"
    code, _, err = run_cli("build", data, "--target", "target", "--hidden", "3", "--epochs", "2", "--batch-size", "4",
                           "-o", book)
    assert code == 0, err
    code, out, _report = _verify(run_cli, book)
    assert code == 0, out



@pytest.mark.slow
@pytest.mark.libreoffice
def test_libreoffice_engine_on_a_workbook_of_300k_formula_cells(tmp_path, run_cli):
    """The independent engine at a size users reach: a sheet larger than the reader's split size is
    read in the engine's own worker (a 178-row, 13-column, 3-class table broke this before)."""
    rng = np.random.default_rng(5)
    x = rng.normal(size=(178, 13)).round(3)
    labels = np.array(["a", "b", "c"])[np.argmax(x[:, :3] + 0.3 * x[:, 3:6], axis=1)]
    data = write_csv(tmp_path / "d.csv", [f"x{i}" for i in range(13)] + ["kind"],
                     [[*row, lab] for row, lab in zip(x.tolist(), labels, strict=True)])
    book = tmp_path / "big.xlsx"
    code, out, err = run_cli("build", data, "--target", "kind", "--hidden", "4", "--epochs", "20", "--batch-size",
                             "8", "--trace-epochs", "20", "--max-cells", "1000000", "--quiet", "-o", book)
    assert code == 0, err
    cells = int(out.split("workbook written to")[1].split(":")[1].split("formula")[0].replace(",", ""))
    assert cells >= 300_000
    code, out, report = _verify(run_cli, book, "--engine", "libreoffice")
    assert code == 0, out
    assert report["cells_compared"] == cells and report["engine"] == "libreoffice"


def test_input_changed_without_recalculation_is_stale_not_a_mismatch(tmp_path, run_cli):
    """A program that edits a number and keeps every saved value (no recalculation): the formulas
    still reproduce the reference on the new input; only the saved values are out of date."""
    book = build(tmp_path, run_cli, *CONFIGS["binary-ce-batch1"])
    stale = tmp_path / "kept.xlsx"
    with zipfile.ZipFile(book) as src, zipfile.ZipFile(stale, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            data = src.read(item.filename)
            if item.filename == "xl/worksheets/sheet2.xml":  # the Parameters sheet: first weight of W_1
                data, done = re.subn(rb'(<c r="B16" s="\d+"><v>)[^<]*(</v>)', rb"\g<1>0.75\g<2>", data)
                assert done == 1
            dst.writestr(item, data)
    code, out, data = _verify(run_cli, stale)
    assert code == 4 and data["verdict"] == "stale", out
    assert data["mismatch_count"] == 0 and not data["formula_differences"]
    assert set(data["stale_per_sheet"]) >= {"Calculator", "Scoring"} and data["stale_count"] > 10
    code, out, _ = run_cli("audit", stale, "--json", tmp_path / "a.json")
    report = json.loads((tmp_path / "a.json").read_text())
    assert report["counts"]["input_edits"] == 1 and report["counts"]["risks"] == data["stale_count"]


@pytest.mark.slow
@pytest.mark.libreoffice
def test_three_engines_agree_on_the_demo_workbook(tmp_path, run_cli):
    """The embedded engine, LibreOffice and the `formulas` package each recalculate the demo workbook
    and agree with the reference trainer cell by cell."""
    from sheetnet.demo import DEMO_FLAGS, demo_csv_text

    data = tmp_path / "demo.csv"
    data.write_text(demo_csv_text())
    assert run_cli("build", data, *DEMO_FLAGS, "--quiet", "-o", tmp_path / "demo.xlsx")[0] == 0
    code, out, report = _verify(run_cli, tmp_path / "demo.xlsx", "--engine", "all")
    assert code == 0, out
    assert set(report["engines"]) == {"embedded", "libreoffice", "formulas"}
    assert all(r["cells_compared"] == report["cells_compared"] > 20_000 for r in report["engines"].values())


def test_formulas_engine_refuses_large_workbooks_with_an_estimate(book, run_cli, monkeypatch):
    from sheetnet.engines import formulaspkg

    monkeypatch.setattr(formulaspkg, "MAX_CELLS", 100)
    code, _out, err = run_cli("verify", book, "--engine", "formulas")
    assert code == 2 and "at most 100 formula cells" in err and "minutes" in err
    code, _out, err = run_cli("audit", book, "--engine", "formulas")
    assert code == 2 and "at most 100 formula cells" in err
