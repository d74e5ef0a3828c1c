"""HTML reports and the learning-rate comparison: the plots are there, non-empty, and the verdicts hold."""

from __future__ import annotations

import base64
import re
import zipfile
from pathlib import Path

import numpy as np
import openpyxl

from tests.conftest import write_csv


def _images(html_file: Path) -> list[bytes]:
    text = html_file.read_text()
    assert text.startswith("<!DOCTYPE html>") and "http://" not in text.split("<body>")[1].split("base64")[0]
    return [base64.b64decode(m) for m in re.findall(r"data:image/png;base64,([A-Za-z0-9+/=]+)", text)]


def _two_input_csv(tmp_path: Path) -> Path:
    rng = np.random.default_rng(4)
    x = rng.normal(size=(80, 2)).round(3)
    label = np.where(x[:, 0] * x[:, 1] > 0, "same", "other")
    return write_csv(tmp_path / "quad.csv", ["u", "v", "label"], [[*r, lab] for r, lab in zip(x.tolist(), label,
                                                                                              strict=True)])


def test_model_report_has_loss_confusion_and_decision_plots(tmp_path, run_cli):
    data = _two_input_csv(tmp_path)
    assert run_cli("train", data, "--target", "label", "--hidden", "4", "--epochs", "40", "--holdout", "0.25",
                   "-o", tmp_path / "m.json")[0] == 0
    code, _out, err = run_cli("report", tmp_path / "m.json", "-o", tmp_path / "r.html")
    assert code == 0, err
    images = _images(tmp_path / "r.html")
    assert len(images) >= 4  # loss, holdout confusion, training confusion, decision regions
    assert all(img.startswith(b"\x89PNG") and len(img) > 5000 for img in images)
    assert "Decision regions" in (tmp_path / "r.html").read_text()


def test_workbook_report_includes_the_verification(tmp_path, run_cli):
    data = _two_input_csv(tmp_path)
    book = tmp_path / "b.xlsx"
    assert run_cli("build", data, "--target", "label", "--hidden", "3", "--epochs", "3", "--batch-size", "8",
                   "-o", book)[0] == 0
    code, _, err = run_cli("report", book, "-o", tmp_path / "r.html")
    assert code == 0, err
    text = (tmp_path / "r.html").read_text()
    assert "verdict: OK" in text and len(_images(tmp_path / "r.html")) >= 3


def test_rates_name_the_best_and_the_failing_rates(tmp_path, run_cli):
    rng = np.random.default_rng(5)
    x = rng.normal(size=(80, 2)).round(3)
    label = np.where(x[:, 0] + 0.5 * x[:, 1] > 0, "up", "down")
    data = write_csv(tmp_path / "line.csv", ["u", "v", "label"], [[*r, lab] for r, lab in zip(x.tolist(), label,
                                                                                              strict=True)])
    code, out, err = run_cli("rates", data, "--target", "label", "--hidden", "4", "--epochs", "25",
                             "--batch-size", "8", "--rates", "0.0001,0.5,1e6", "-o", tmp_path / "rates.html",
                             "--workbook", tmp_path / "rates.xlsx")
    assert code == 0, err
    lines = out.splitlines()
    verdicts = {float(line.split()[0]): line.split()[-1] for line in lines[1:4]}
    assert verdicts[0.0001] == "stalled"           # far too small: the loss barely moves
    assert verdicts[1e6] in ("diverged", "unstable")
    assert "lowest holdout loss at learning rate 0.5" in out
    assert _images(tmp_path / "rates.html")
    names = zipfile.ZipFile(tmp_path / "rates.xlsx").namelist()
    assert any(n.startswith("xl/charts/chart") for n in names)  # a native chart
    sheet = openpyxl.load_workbook(tmp_path / "rates.xlsx")["Learning rates"]
    assert sheet["B3"].value == "lr 0.0001"


def test_python_api_reports_and_compares_rates(tmp_path):
    import pandas as pd

    import sheetnet

    rng = np.random.default_rng(6)
    x = rng.normal(size=(60, 2))
    frame = pd.DataFrame({"u": x[:, 0], "v": x[:, 1], "label": np.where(x[:, 0] > x[:, 1], "a", "b")})
    runs = sheetnet.compare_learning_rates(frame, "label", [0.01, 0.5], hidden=(3,), epochs=10, batch_size=8)
    assert [r.rate for r in runs] == [0.01, 0.5] and all(r.curve for r in runs)
    model = sheetnet.train(frame, "label", hidden=(3,), epochs=10).model
    model.save(tmp_path / "m.json")
    page = sheetnet.report_html(tmp_path / "m.json", tmp_path / "r.html")
    assert _images(page)


def test_a_model_files_report_is_in_raw_units_and_speaks_of_a_model(tmp_path, run_cli):
    """Inputs far from 0 (a temperature of 200-300, a pressure of 1,000-2,000): without data the plane
    drawn is where the model's standard scaling says its inputs lay (mean +- 3 standard deviations, the
    three-sigma rule, common practice), in those units; with --data the points are drawn too."""
    from sheetnet.htmlreport import _plane
    from sheetnet.net.model import load_model

    rng = np.random.default_rng(7)
    t, p = rng.uniform(200, 300, 120).round(2), rng.uniform(1000, 2000, 120).round(1)
    label = np.where((t - 250) / 50 + (p - 1500) / 500 > 0, "fail", "pass")
    data = write_csv(tmp_path / "plant.csv", ["temp", "pressure", "status"],
                     [[a, b, c] for a, b, c in zip(t, p, label, strict=True)])
    assert run_cli("train", data, "--target", "status", "--epochs", "20", "-o", tmp_path / "m.json")[0] == 0
    lo, hi = _plane(load_model(tmp_path / "m.json"), None)
    assert (lo < [t.min(), p.min()]).all() and (hi > [t.max(), p.max()]).all()
    assert (lo > [100, 0]).all() and (hi < [400, 3000]).all()
    assert run_cli("report", tmp_path / "m.json", "-o", tmp_path / "r.html")[0] == 0
    assert run_cli("report", tmp_path / "m.json", "--data", data, "-o", tmp_path / "rd.html")[0] == 0
    plain, with_points = (tmp_path / "r.html").read_text(), (tmp_path / "rd.html").read_text()
    assert "This report describes a model; it does not validate the model" in plain
    assert "This workbook" not in plain
    assert "scaling says its training inputs lay" in plain and "Over the data" in with_points
    assert _images(tmp_path / "r.html")[-1] != _images(tmp_path / "rd.html")[-1]


def test_a_model_with_more_than_two_inputs_is_drawn_as_a_network(tmp_path, run_cli):
    """Fisher's iris measurements (Fisher 1936, as scikit-learn ships them): four inputs, so no
    decision plane; the report draws the network's weights instead."""
    import sklearn.datasets

    frame = sklearn.datasets.load_iris(as_frame=True).frame
    frame.to_csv(tmp_path / "iris.csv", index=False)
    assert run_cli("train", tmp_path / "iris.csv", "--target", "target", "--epochs", "5",
                   "-o", tmp_path / "m.json")[0] == 0
    assert run_cli("report", tmp_path / "m.json", "-o", tmp_path / "r.html")[0] == 0
    text = (tmp_path / "r.html").read_text()
    assert "The network" in text and "Decision regions" not in text
    assert _images(tmp_path / "r.html")[-1].startswith(b"\x89PNG")


def test_report_data_goes_with_a_model_file_only(tmp_path, run_cli, xor_csv):
    code, _, err = run_cli("report", tmp_path / "book.xlsx", "--data", xor_csv, "-o", tmp_path / "r.html")
    assert code == 2 and "--data goes with a model file" in err
    assert not (tmp_path / "r.html").exists()
