"""Workbooks of models trained elsewhere or earlier: the model's own settings, a target column of
another name, data with no target at all, and public data sets of several shapes with default flags."""

from __future__ import annotations

import json
import re

import numpy as np
import openpyxl
import pandas as pd
import pytest

import sheetnet
from tests.conftest import write_csv


def _guide(path) -> dict[str, str]:
    return {row[0]: row[1] for row in openpyxl.load_workbook(path)["Guide"].iter_rows(values_only=True) if row[0]}


def _cells(out: str) -> int:
    return int(re.search(r"([\d,]+) formula cells", out).group(1).replace(",", ""))


@pytest.fixture(scope="module")
def wine(tmp_path_factory):
    """scikit-learn's copy of the UCI wine data (Forina et al.; Aeberhard, Coomans & de Vel 1992): 178 rows,
    13 inputs, 3 classes."""
    from sklearn.datasets import load_wine

    folder = tmp_path_factory.mktemp("wine")
    frame = load_wine(as_frame=True).frame
    frame.to_csv(folder / "wine.csv", index=False)
    return folder


def test_build_model_keeps_the_settings_train_stored(wine, tmp_path, run_cli):
    data = wine / "wine.csv"
    assert run_cli("train", data, "--target", "target", "--epochs", "200", "--batch-size", "8", "--lr", "0.5",
                   "--momentum", "0.5", "--quiet", "-o", tmp_path / "m.json")[0] == 0
    code, out, err = run_cli("build", "--model", tmp_path / "m.json", data, "--quiet", "-o", tmp_path / "b.xlsx")
    assert code == 0, err
    assert "continues from the model's weights with the model's stored settings" in out
    guide = _guide(tmp_path / "b.xlsx")
    assert "learning_rate=0.5, epochs=200, batch_size=8" in guide["training settings"]
    assert guide["record"].startswith("epochs 1-") and "of 200" in guide["record"]
    setup = openpyxl.load_workbook(tmp_path / "b.xlsx")["Training setup"]
    assert (setup["B3"].value, setup["B4"].value) == (0.5, 0.5)  # learning rate, momentum
    code, out, _ = run_cli("build", "--model", tmp_path / "m.json", data, "--lr", "0.05", "--quiet",
                           "-o", tmp_path / "c.xlsx")
    assert code == 0 and "except the learning rate given" in out
    assert openpyxl.load_workbook(tmp_path / "c.xlsx")["Training setup"]["B3"].value == 0.05
    assert run_cli("verify", tmp_path / "b.xlsx", "--quiet")[0] == 0


def test_a_scikit_learn_model_with_another_target_name_or_none(wine, tmp_path, run_cli):
    from sklearn.neural_network import MLPClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    frame = pd.read_csv(wine / "wine.csv")
    x, y = frame.drop(columns="target"), frame["target"]
    fitted = make_pipeline(StandardScaler(), MLPClassifier((5,), max_iter=400, random_state=0)).fit(x, y)
    model = sheetnet.from_sklearn(fitted)
    assert model.inputs == tuple(x.columns) and model.target == ("y",)  # the names it was fitted with
    model.save(tmp_path / "sk.json")
    renamed = sheetnet.from_sklearn(fitted, target="cultivar")
    assert renamed.target == ("cultivar",)
    with pytest.raises(sheetnet.SheetNetError, match="inputs"):
        sheetnet.from_sklearn(fitted, inputs=["a", "b"])

    code, out, err = run_cli("build", "--model", tmp_path / "sk.json", wine / "wine.csv", "--quiet",
                             "-o", tmp_path / "none.xlsx")
    assert code == 0, err
    assert "no target column 'y'" in out and "--target" in out
    assert openpyxl.load_workbook(tmp_path / "none.xlsx").sheetnames == [
        "Guide", "Parameters", "Calculator", "Scoring", "sheetnet_layout"]
    code, out, err = run_cli("build", "--model", tmp_path / "sk.json", wine / "wine.csv", "--target", "target",
                             "--epochs", "3", "--quiet", "-o", tmp_path / "mapped.xlsx")
    assert code == 0, err
    assert "Training record" in openpyxl.load_workbook(tmp_path / "mapped.xlsx").sheetnames
    x.to_csv(tmp_path / "new_cases.csv", index=False)
    code, out, err = run_cli("build", "--model", tmp_path / "sk.json", tmp_path / "new_cases.csv", "--quiet",
                             "-o", tmp_path / "new.xlsx")
    assert code == 0, err
    for book in ("none.xlsx", "mapped.xlsx", "new.xlsx"):
        assert run_cli("verify", tmp_path / book, "--quiet")[0] == 0, book
    # The workbook scores as scikit-learn predicts (scikit-learn as the outside oracle).
    scored = openpyxl.load_workbook(tmp_path / "new.xlsx", data_only=True)["Scoring"]
    header_row = next(r for r in scored.iter_rows(values_only=True) if r and r[0] == "case")
    column = header_row.index("predicted")
    start = next(r[0].row for r in scored.iter_rows(min_col=1, max_col=1) if r[0].value == "case")
    predicted = [scored.cell(row=start + 1 + i, column=column + 1).value for i in range(len(x))]
    assert [str(int(float(p))) for p in predicted] == [str(v) for v in fitted.predict(x)]


@pytest.mark.slow
@pytest.mark.parametrize("loader, target", [("load_digits", "target"), ("load_breast_cancer", "target"),
                                            ("load_diabetes", "target")],
                         ids=["digits 1797x64 10 classes", "breast cancer 569x30", "diabetes regression 442x10"])
def test_public_data_sets_build_with_default_flags(loader, target, tmp_path, run_cli):
    """scikit-learn's bundled copies of public data sets (UCI optical digits; Wisconsin diagnostic breast
    cancer; Efron et al. 2004 diabetes): default flags give a workbook under the cap that verifies."""
    import sklearn.datasets

    frame = getattr(sklearn.datasets, loader)(as_frame=True).frame
    data = tmp_path / "d.csv"
    frame.to_csv(data, index=False)
    code, out, err = run_cli("build", data, "--target", target, "--quiet", "-o", tmp_path / "b.xlsx")
    assert code == 0, err
    assert _cells(out) <= 500_000
    assert "metrics over all data (the trainer, training rows)" in _guide(tmp_path / "b.xlsx")
    assert run_cli("verify", tmp_path / "b.xlsx", "--quiet")[0] == 0


def test_a_long_table_gets_a_stated_scoring_sample(tmp_path, run_cli):
    rng = np.random.default_rng(3)
    x = rng.normal(size=(30_000, 3)).round(4)
    rows = [[*r, int(r[0] + r[1] > 0)] for r in x.tolist()]
    data = write_csv(tmp_path / "long.csv", ["a", "b", "c", "y"], rows)
    code, out, err = run_cli("build", data, "--target", "y", "--epochs", "2", "--max-cells", "60000", "--quiet",
                             "-o", tmp_path / "b.xlsx")
    assert code == 0, err
    held = int(re.search(r"the Scoring sheet holds a sample: ([\d,]+) of the 30,000 cases", out).group(1)
               .replace(",", ""))
    assert 0 < held < 30_000 and _cells(out) <= 60_000
    description = json.loads("".join(c.value for (c,) in openpyxl.load_workbook(tmp_path / "b.xlsx")[
        "sheetnet_layout"].iter_rows(min_row=2, max_col=1) if c.value))
    assert description["spec"]["n_cases"] == held
    assert run_cli("verify", tmp_path / "b.xlsx", "--quiet")[0] == 0
    _sampled_cases_carry_their_data_rows(tmp_path / "b.xlsx", rows)


def _sampled_cases_carry_their_data_rows(path, rows: list) -> None:
    """Each sampled case's number is its row in the data file, so it can be found there (and the record
    names its cases by the same numbers)."""
    book = openpyxl.load_workbook(path)
    scoring = [r for r in book["Scoring"].iter_rows(values_only=True) if isinstance(r[0], int)]
    numbers = [r[0] for r in scoring]
    assert numbers == sorted(numbers) and numbers[-1] > len(numbers)
    for case in scoring[:: max(1, len(scoring) // 50)]:
        assert list(case[2:6]) == rows[case[0] - 1]
    header = next(r for r in book["Training record"].iter_rows(values_only=True) if r[0] == "step")
    case_col = header.index("case")
    recorded = {r[case_col] for r in book["Training record"].iter_rows(values_only=True) if isinstance(r[0], int)}
    assert recorded and recorded <= set(numbers)


def test_every_option_shows_its_default_in_help():
    """Each option of each command that has a default says it in --help (argparse's own help text)."""
    import argparse

    from sheetnet.flags import command_parser

    parser = command_parser()
    commands = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    checked = 0
    for name, sub in commands.choices.items():
        formatter = sub._get_formatter()
        for action in sub._actions:
            if not action.option_strings or action.default in (None, False, argparse.SUPPRESS) or \
                    isinstance(action, argparse._HelpAction):
                continue
            assert "default" in formatter._get_help_string(action), (name, action.option_strings)
            checked += 1
    assert checked > 20


@pytest.mark.parametrize("args, says", [
    (["rates", "{csv}", "--target", "y", "--rates", "-1,0.1", "-o", "{out}.html"], "must be > 0, got '-1'"),
    (["train", "{csv}", "--target", "y", "--lr", "-0.1", "-o", "{out}.json"], "must be > 0, got '-0.1'"),
    (["score", "{csv}", "{csv}", "--threshold", "2", "-o", "{out}.csv"], "must be a number in [0, 1]"),
    (["train", "{csv}", "--target", "y", "--holdout", "1", "-o", "{out}.json"], "fraction in [0, 1)"),
    (["train", "{csv}", "--target", "y", "--epochs", "0", "-o", "{out}.json"], "must be >= 1"),
    (["train", "{csv}", "--target", "y", "--batch-size", "-2", "-o", "{out}.json"], "must be >= 1"),
    (["train", "{csv}", "--target", "y", "--seed", "-1", "-o", "{out}.json"], "from 0 to 2**63 - 1"),
    (["build", "{csv}", "--target", "y", "--trace-epochs", "-1", "-o", "{out}.xlsx"], "must be >= 0 (0: none)"),
])
def test_out_of_range_values_are_clear_usage_errors(args, says, tmp_path, run_cli, xor_csv):
    out = tmp_path / "out"
    code, _, err = run_cli(*[a.format(csv=xor_csv, out=out) for a in args])
    assert code == 2 and says in err and "expected one argument" not in err
    assert not list(tmp_path.glob("out*"))



def test_build_model_checks_the_target_flag_and_says_which_flags_it_ignores(wine, tmp_path, run_cli):
    data = wine / "wine.csv"
    assert run_cli("train", data, "--target", "target", "--epochs", "5", "--quiet", "-o", tmp_path / "m.json")[0] == 0
    code, _, err = run_cli("build", "--model", tmp_path / "m.json", data, "--target", "target,alcohol",
                           "-o", tmp_path / "a.xlsx")
    assert code == 2 and "names 2 column(s)" in err and "1 target(s)" in err
    code, _, err = run_cli("build", "--model", tmp_path / "m.json", data, "--target", "nosuch",
                           "-o", tmp_path / "b.xlsx")
    assert code == 2 and "'nosuch': no such column" in err
    code, out, err = run_cli("build", "--model", tmp_path / "m.json", data, "--hidden", "7", "--scale", "minmax",
                             "--quiet", "-o", tmp_path / "c.xlsx")
    assert code == 0 and "--hidden, --scale ignored: the model file fixes them" in out, err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c.xlsx", "m.json"]


@pytest.mark.parametrize("key, value, says", [("learning_rate", -1, "learning rate must be a positive number"),
                                              ("epochs", 0, "epochs must be a whole number >= 1"),
                                              ("batch_size", "half", "batch_size: expected a whole number"),
                                              ("seed", 1.5, "seed: expected a whole number"),
                                              ("momentum", 1.5, "momentum must be in [0, 1)")])
def test_stored_settings_that_are_not_valid_are_refused_not_replaced(wine, tmp_path, run_cli, key, value, says):
    data = wine / "wine.csv"
    assert run_cli("train", data, "--target", "target", "--epochs", "5", "--quiet", "-o", tmp_path / "m.json")[0] == 0
    model = json.loads((tmp_path / "m.json").read_text())
    model["training"]["settings"][key] = value
    (tmp_path / "m.json").write_text(json.dumps(model))
    code, _, err = run_cli("build", "--model", tmp_path / "m.json", data, "-o", tmp_path / "b.xlsx")
    assert code == 1 and "training.settings" in err and says in err and str(tmp_path / "m.json") in err


def test_from_sklearn_refuses_names_a_model_file_could_not_hold(wine):
    import warnings

    from sklearn.neural_network import MLPClassifier

    frame = pd.read_csv(wine / "wine.csv")
    x, y = frame.drop(columns="target").to_numpy()[:, :3], frame["target"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mlp = MLPClassifier((3,), max_iter=20, random_state=0).fit(x, y)
    for kwargs, says in ((dict(target=""), "non-empty"), (dict(inputs=["a", "a", "b"]), "unique"),
                         (dict(target="a", inputs=["a", "b", "c"]), "also an input")):
        with pytest.raises(sheetnet.errors.UsageError, match=says):
            sheetnet.from_sklearn(mlp, **kwargs)


def test_hundreds_of_unknown_labels_make_one_readable_line(tmp_path, run_cli, xor_csv):
    assert run_cli("train", xor_csv, "--target", "y", "--epochs", "2", "--quiet", "-o", tmp_path / "m.json")[0] == 0
    data = write_csv(tmp_path / "u.csv", ["x1", "x2", "y"], [[0, 1, f"label{i}"] for i in range(300)])
    code, _, err = run_cli("build", "--model", tmp_path / "m.json", data, "-o", tmp_path / "b.xlsx")
    assert code == 1 and "300 label(s) the model does not know" in err and "and 290 more" in err
    assert len(err) < 400 and len(err.strip().splitlines()) == 1


def test_a_model_file_naming_a_key_twice_is_refused(wine, tmp_path, run_cli):
    """JSON (RFC 8259, section 4) leaves repeated names undefined: readers keep the first or the last."""
    assert run_cli("train", wine / "wine.csv", "--target", "target", "--epochs", "2", "--quiet", "-o",
                   tmp_path / "m.json")[0] == 0
    text = (tmp_path / "m.json").read_text().replace('"task":', '"task": "regression", "task":', 1)
    (tmp_path / "twice.json").write_text(text)
    code, _, err = run_cli("score", tmp_path / "twice.json", wine / "wine.csv", "-o", tmp_path / "s.csv")
    assert code == 1 and "'task' appears twice" in err and not (tmp_path / "s.csv").exists()


def test_a_partial_record_is_the_start_of_the_real_run(wine, tmp_path, run_cli):
    """With fewer rows than the run has, the record replays the run's own first steps (the same cases in
    the same order as the full record), not a separate run on a subset."""
    data = wine / "wine.csv"
    flags = ["--target", "target", "--epochs", "3", "--batch-size", "4", "--quiet"]
    assert run_cli("build", data, *flags, "--trace-epochs", "1", "-o", tmp_path / "full.xlsx")[0] == 0
    code, out, _ = run_cli("build", data, *flags, "--trace-epochs", "1", "--trace-rows", "10", "-o",
                           tmp_path / "part.xlsx")
    assert code == 0 and "the run's first 2 steps (8 cases, within epoch 1 of 3" in out

    def cases(path):
        rows = list(openpyxl.load_workbook(path)["Training record"].iter_rows(values_only=True))
        header = next(n for n, r in enumerate(rows) if r[0] == "step")
        return [r[2] for r in rows[header + 1:] if isinstance(r[0], int)]

    assert cases(tmp_path / "part.xlsx") == cases(tmp_path / "full.xlsx")[:8]
    assert run_cli("verify", tmp_path / "part.xlsx", "--quiet")[0] == 0


def test_without_a_record_the_scoring_sample_uses_the_whole_cap(tmp_path, run_cli):
    rng = np.random.default_rng(5)
    rows = [[*r, int(r[0] > 0)] for r in rng.normal(size=(20_000, 3)).round(4).tolist()]
    data = write_csv(tmp_path / "long.csv", ["a", "b", "c", "y"], rows)
    code, out, err = run_cli("build", data, "--target", "y", "--epochs", "1", "--trace-epochs", "0",
                             "--max-cells", "100000", "--quiet", "-o", tmp_path / "b.xlsx")
    assert code == 0, err
    assert _cells(out) > 90_000 and "evenly spaced cases" in out and "the record's" not in out


def test_size_flags_beyond_the_run_and_ignored_thresholds_are_said(wine, tmp_path, run_cli):
    data = wine / "wine.csv"
    code, out, _ = run_cli("build", data, "--target", "target", "--epochs", "2", "--trace-epochs", "9",
                           "--scoring-rows", "5", "--quiet", "-o", tmp_path / "b.xlsx")
    assert code == 0 and "--trace-epochs 9 is more than the run's 2 epochs" in out
    assert "--scoring-rows 5 is fewer than the" in out
    assert run_cli("train", data, "--target", "target", "--epochs", "2", "--quiet", "-o", tmp_path / "m.json")[0] == 0
    code, out, _ = run_cli("score", tmp_path / "m.json", data, "--threshold", "0.3", "-o", tmp_path / "s.csv")
    assert code == 0 and "--threshold is ignored: a multiclass model predicts the most probable class" in out
    for rates in ("0.1,0.1", "0.1,,0.2"):
        code, _, err = run_cli("rates", data, "--target", "target", "--rates", rates, "-o", tmp_path / "r.html")
        assert code == 2 and "rates" in err
