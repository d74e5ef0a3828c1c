"""The workbook: every formula recomputed by engines that are not sheetnet's code equals the trainer."""

from __future__ import annotations

import json
import re
import time
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pytest

from sheetnet.net.model import load_model
from tests.bookcheck import (
    block_values,
    cached_values,
    formula_cells,
    formulas_package_values,
    mismatches,
)
from tests.conftest import write_csv

RNG = np.random.default_rng(42)


def _rows(n, labels):
    x = RNG.normal(0, 1, (n, 2)).round(3)
    return [[*row, labels[i % len(labels)]] for i, row in enumerate(x.tolist())]


DATASETS = {
    "binary": (["a", "b", "label"], _rows(6, ["yes", "no"])),
    "three": (["a", "b", "kind"], _rows(6, ["red", "green", "blue"])),
    "numeric": (["a", "b", "y1", "y2"], [[*r[:2], round(r[0] * 0.5 + 0.1, 3), round(r[1] - r[0], 3)]
                                        for r in _rows(6, ["-"])]),
    "multilabel": (["a", "b", "p", "q"], [[*r[:2], i % 2, (i // 2) % 2] for i, r in enumerate(_rows(6, ["-"]))]),
}

CONFIGS = {
    "binary-ce-batch1": ("binary", ["--target", "label", "--hidden", "2", "--epochs", "2", "--lr", "0.5",
                                    "--no-shuffle"]),
    "softmax-ce-batch3-momentum-l2": ("three", ["--target", "kind", "--hidden", "3", "--activation", "tanh",
                                                "--batch-size", "3", "--epochs", "2", "--momentum", "0.5",
                                                "--l2", "0.01"]),
    "regression-relu-full": ("numeric", ["--target", "y1,y2", "--hidden", "3", "--activation", "relu",
                                         "--batch-size", "full", "--epochs", "3", "--scale", "minmax"]),
    "multilabel-steep": ("multilabel", ["--target", "p,q", "--hidden", "2", "--steepness", "2", "--midpoint", "0.5",
                                        "--batch-size", "4", "--epochs", "2"]),
    "softmax-squared-two-layers": ("three", ["--target", "kind", "--hidden", "2,2", "--loss", "squared",
                                             "--epochs", "1", "--batch-size", "2", "--scale", "none"]),
    "identity-output-cross-entropy": ("binary", ["--target", "label", "--hidden", "2", "--output", "identity",
                                             "--loss", "cross-entropy", "--task", "binary", "--epochs", "2"]),
    "sigmoid-squared": ("binary", ["--target", "label", "--hidden", "2", "--output", "sigmoid", "--loss", "squared",
                                   "--epochs", "2", "--batch-size", "2"]),
}


def build(tmp_path: Path, run_cli, dataset: str, flags: list[str], name: str = "book.xlsx") -> Path:
    header, rows = DATASETS[dataset]
    data = write_csv(tmp_path / f"{dataset}.csv", header, rows)
    out = tmp_path / name
    code, _stdout, err = run_cli("build", data, *flags, "-o", out)
    assert code == 0, err
    return out


def defined_block(path: Path, name: str) -> tuple[str, str, int, int]:
    """(sheet, top-left, rows, cols) of a workbook-scoped defined name, read from the file."""
    from openpyxl.utils.cell import range_boundaries

    book = openpyxl.load_workbook(path)
    ((sheet, rng),) = list(book.defined_names[name].destinations)
    min_col, min_row, max_col, max_row = range_boundaries(rng.replace("$", ""))
    from openpyxl.utils.cell import get_column_letter

    return sheet, f"{get_column_letter(min_col)}{min_row}", max_row - min_row + 1, max_col - min_col + 1


@pytest.mark.parametrize("config", sorted(CONFIGS))
def test_every_formula_recomputed_by_formulas_package_equals_trainer(config, tmp_path, run_cli):
    dataset, flags = CONFIGS[config]
    book = build(tmp_path, run_cli, dataset, flags)
    cells = formula_cells(book)
    assert len(cells) > 50
    # Oracle: the `formulas` package (vinci1it2000/formulas), an Excel formula engine outside this project,
    # recomputes every cell; the cached values are the numpy trainer's; tolerance 1e-9.
    bad = mismatches(cached_values(book), formulas_package_values(book), cells)
    assert not bad, bad[:5]


def test_final_block_equals_trained_model(tmp_path, run_cli):
    dataset, flags = CONFIGS["softmax-ce-batch3-momentum-l2"]
    book = build(tmp_path, run_cli, dataset, flags)
    code, _, _ = run_cli("train", tmp_path / f"{dataset}.csv", *flags, "-o", tmp_path / "m.json")
    assert code == 0
    model = load_model(tmp_path / "m.json")
    for k, layer in enumerate(model.layers, start=1):
        sheet, corner, rows_, cols = defined_block(book, f"final_W_{k}")
        np.testing.assert_allclose(block_values(book, sheet, corner, rows_, cols), layer.weights, atol=1e-12)
        sheet, corner, rows_, cols = defined_block(book, f"W_{k}")
        np.testing.assert_allclose(block_values(book, sheet, corner, rows_, cols), layer.weights, atol=0)


def test_defined_names_cover_every_block(tmp_path, run_cli):
    book = build(tmp_path, run_cli, *CONFIGS["softmax-ce-batch3-momentum-l2"])
    names = set(openpyxl.load_workbook(book).defined_names)
    expected = {f"{p}{m}_{k}" for p in ("", "init_", "final_") for m in ("W", "b") for k in (1, 2)}
    assert expected | {"learning_rate", "momentum", "l2_penalty", "scale_offset", "scale_divisor", "threshold",
                       "class_labels"} <= names
    assert defined_block(book, "W_1")[2:] == (3, 2) and defined_block(book, "b_2")[2:] == (3, 1)


def test_two_builds_are_byte_identical(tmp_path, run_cli):
    dataset, flags = CONFIGS["binary-ce-batch1"]
    first = build(tmp_path, run_cli, dataset, flags, "one.xlsx")
    time.sleep(2.1)  # past the zip format's 2-second timestamp resolution: no clock may leak into the file
    second = build(tmp_path, run_cli, dataset, flags, "two.xlsx")
    assert first.read_bytes() == second.read_bytes()


def test_text_from_the_data_stays_text(tmp_path, run_cli):
    tricky = ["=1+1", "+SUM(A1)", "-2+3", "@cmd"]
    rows = [[0.1 * i, 1 - 0.2 * i, tricky[(i // 2) % 4] if i % 2 else "plain"] for i in range(8)]
    data = write_csv(tmp_path / "d.csv", ["=x", "+y", "label"], rows)
    out = tmp_path / "b.xlsx"
    code, _, err = run_cli("build", data, "--target", "label", "--task", "multiclass", "--epochs", "1", "-o", out)
    assert code == 0, err
    book = openpyxl.load_workbook(out)
    texts = [c for ws in book.worksheets for row in ws.iter_rows() for c in row
             if isinstance(c.value, str) and c.value in (*tricky, "=x", "+y")]
    assert texts and all(c.data_type == "s" for c in texts)
    assert {c.value for c in texts} >= {*tricky, "=x", "+y"}


def test_formula_limits_hold(tmp_path, run_cli):
    from openpyxl.formula.tokenizer import Tokenizer

    book = build(tmp_path, run_cli, *CONFIGS["softmax-squared-two-layers"])
    for formula in formula_cells(book).values():
        # Limits: Microsoft Support, "Excel specifications and limits": 8,192 characters, 64 nesting levels,
        # 255 arguments per function (Microsoft Support, "Excel specifications and limits"; the last two
        # limits as secondary sources state them).
        assert len(formula) <= 8192
        depth, deepest, args = 0, 0, [0]
        for token in Tokenizer(formula).items:
            if token.type == "FUNC" and token.subtype == "OPEN":
                depth += 1
                args.append(1)
            elif token.type == "FUNC" and token.subtype == "CLOSE":
                depth -= 1
                assert args.pop() <= 255
            elif token.type == "SEP" and token.subtype == "ARG":
                args[-1] += 1
            deepest = max(deepest, depth)
        assert deepest <= 64


def test_default_build_fits_the_cap_and_says_what_it_left_out(tmp_path, run_cli):
    header, rows = DATASETS["binary"]
    data = write_csv(tmp_path / "d.csv", header, rows)
    code, out, err = run_cli("build", data, "--target", "label", "--epochs", "50", "--max-cells", "1500",
                             "-o", tmp_path / "b.xlsx")
    assert code == 0, err
    cells = int(re.search(r"([\d,]+) formula cells", out).group(1).replace(",", ""))
    assert cells <= 1500
    assert "note: the training record replays epochs 1-" in out and "of 50" in out
    assert run_cli("verify", tmp_path / "b.xlsx")[0] == 0


def test_explicit_sizes_over_the_cap_are_refused_with_flags_that_fit(tmp_path, run_cli):
    header, rows = DATASETS["binary"]
    data = write_csv(tmp_path / "d.csv", header, rows)
    code, _, err = run_cli("build", data, "--target", "label", "--epochs", "50", "--trace-epochs", "50",
                           "--max-cells", "1500", "-o", tmp_path / "b.xlsx")
    assert code == 1 and "--max-cells" in err
    assert not (tmp_path / "b.xlsx").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["d.csv"]
    alternatives = err.split("try ", 1)[1].strip().split(" or ")
    assert len(alternatives) >= 3, err
    for advice in alternatives:  # each works on its own, the other flags as asked
        flags = [part.replace(",", "") for part in advice.split(" (")[0].split()]
        given = ["--trace-epochs", "50", "--max-cells", "1500"]
        for flag in flags[::2]:
            if flag in given:
                del given[given.index(flag):given.index(flag) + 2]
        code, _, err = run_cli("build", data, "--target", "label", "--epochs", "50", *given, *flags,
                               "-o", tmp_path / "b.xlsx", "--force")
        assert code == 0, (advice, err)


def test_layout_description_is_stored(tmp_path, run_cli):
    from sheetnet.book.schema import read_spec

    book = build(tmp_path, run_cli, *CONFIGS["binary-ce-batch1"])
    sheet = openpyxl.load_workbook(book)["sheetnet_layout"]
    assert sheet.sheet_state == "hidden"
    text = "".join(c.value for (c,) in sheet.iter_rows(min_row=2, max_col=1) if c.value)
    data = json.loads(text)
    spec, problems = read_spec(data["spec"])
    assert not problems and spec.units == (2, 1) and spec.record.n_rows == 12 and data["fingerprints"]["formulas"]


def test_no_macros_links_or_volatile_functions(tmp_path, run_cli):
    book = build(tmp_path, run_cli, *CONFIGS["multilabel-steep"])
    names = zipfile.ZipFile(book).namelist()
    assert not [n for n in names if "vba" in n.lower() or "externalLink" in n]
    volatile = ("INDIRECT(", "OFFSET(", "NOW(", "TODAY(", "RAND(", "RANDBETWEEN(")
    assert not [f for f in formula_cells(book).values() if any(v in f.upper() for v in volatile)]


def test_model_without_data_gives_parameters_and_calculator(tmp_path, run_cli):
    model = {"format": "sheetnet-model", "version": 1, "inputs": ["u", "v"], "outputs": ["y"], "task": "regression",
             "layers": [{"weights": [[0.5, -1.0]], "bias": [0.25], "activation": "identity"}]}
    (tmp_path / "m.json").write_text(json.dumps(model))
    out = tmp_path / "b.xlsx"
    code, _, err = run_cli("build", "--model", tmp_path / "m.json", "-o", out)
    assert code == 0, err
    assert openpyxl.load_workbook(out).sheetnames == ["Guide", "Parameters", "Calculator", "sheetnet_layout"]


@pytest.mark.parametrize("config", sorted(CONFIGS))
def test_shaped_record_rows_equal_rows_built_one_by_one(config, tmp_path, run_cli, monkeypatch):
    from sheetnet.book.cells import record
    from sheetnet.book.expected import expected_numbers
    from sheetnet.book.layout import build_layout
    from sheetnet.book.read import read_inputs, read_layout
    from sheetnet.xlsx.reader import read_workbook

    book = read_workbook(build(tmp_path, run_cli, *CONFIGS[config]))
    layout, _ = read_layout(book)
    numbers = expected_numbers(layout.spec, read_inputs(book, layout))
    layout = build_layout(layout.spec)
    shaped = list(record.record_entries(layout, numbers))
    monkeypatch.setattr(record, "SHAPED_RECORD_ROWS", False)
    one_by_one = list(record.record_entries(layout, numbers))
    assert len(shaped) == len(one_by_one) > 100
    for a, b in zip(shaped, one_by_one, strict=True):
        assert (a.row, a.col, a.role, a.content) == (b.row, b.col, b.role, b.content)
        assert a.value == b.value


def test_hand_written_model_without_target_key_gets_a_training_record(tmp_path, run_cli):
    model = {"format": "sheetnet-model", "version": 1, "inputs": ["a", "b"], "outputs": ["label"], "task": "binary",
             "classes": ["no", "yes"],
             "layers": [{"weights": [[0.5, -0.3]], "bias": [0.1], "activation": "sigmoid"}], "loss": "squared"}
    (tmp_path / "m.json").write_text(json.dumps(model))
    header, rows = DATASETS["binary"]
    data = write_csv(tmp_path / "d.csv", header, rows)
    out = tmp_path / "b.xlsx"
    code, stdout, err = run_cli("build", "--model", tmp_path / "m.json", data, "--epochs", "2", "-o", out)
    assert code == 0 and "training record of 12 rows" in stdout, err
    assert "Training record" in openpyxl.load_workbook(out).sheetnames


def test_the_xlsxwriter_internals_the_writer_overrides_are_there():
    """book/write.py overrides private XlsxWriter methods (pinned to >=3.1,<3.4 in pyproject.toml); a
    version that renames or reshapes them must fail here, loudly, not write 15-digit numbers quietly."""
    import inspect

    from xlsxwriter.worksheet import Worksheet

    assert list(inspect.signature(Worksheet._prepare_formula).parameters)[:2] == ["self", "formula"]
    assert list(inspect.signature(Worksheet._xml_number_element).parameters) == ["self", "number", "attributes"]
    assert list(inspect.signature(Worksheet._check_dimensions).parameters)[:3] == ["self", "row", "col"]
    assert "current_row_num" in inspect.signature(Worksheet._write_single_row).parameters


def test_numbers_are_written_to_round_trip(tmp_path):
    """IEEE 754 binary64 needs 17 significant digits to round-trip (IEEE Std 754-2008, section 5.12.2,
    clause from memory; reproduced here with Python floats):
    a number the writer stores reads back bit for bit."""
    import zipfile

    import xlsxwriter

    from sheetnet.book.write import _Sheet

    values = [0.1 + 0.2, 1 / 3, 2.0 ** -1074, 1.7976931348623157e308, -123456.78901234567]
    book = xlsxwriter.Workbook(tmp_path / "n.xlsx", {"constant_memory": True})
    sheet = book.add_worksheet("n", worksheet_class=_Sheet)
    for row, value in enumerate(values):
        sheet.write_number(row, 0, value)
    book.close()
    xml = zipfile.ZipFile(tmp_path / "n.xlsx").read("xl/worksheets/sheet1.xml").decode()
    found = [float(v) for v in re.findall(r"<v>([^<]+)</v>", xml)]
    assert found == values
