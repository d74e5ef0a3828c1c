"""scikit-learn models become sheetnet models and workbooks whose recalculated scores match the estimator.

Data: scikit-learn's bundled sets, cited from their DESCR: breast cancer (Street, Wolberg & Mangasarian
1993), iris (Fisher 1936), diabetes (Efron et al. 2004, "Least Angle Regression", from memory)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes, load_iris
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import MinMaxScaler, StandardScaler

import sheetnet
from sheetnet.checks.verify import verify
from sheetnet.errors import UsageError
from sheetnet.net.network import predict_outputs


def _fit(estimator, x, y):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return estimator.fit(x, y)


CASES = {
    "binary-logistic-standard": (load_breast_cancer, lambda: make_pipeline(
        StandardScaler(), MLPClassifier(hidden_layer_sizes=(6,), activation="logistic", max_iter=200, random_state=0))),
    "multiclass-tanh-minmax": (load_iris, lambda: make_pipeline(
        MinMaxScaler(), MLPClassifier(hidden_layer_sizes=(5, 4), activation="tanh", max_iter=300, random_state=1))),
    "regression-relu": (load_diabetes, lambda: make_pipeline(
        StandardScaler(), MLPRegressor(hidden_layer_sizes=(8,), activation="relu", max_iter=300, random_state=2))),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_from_sklearn_reproduces_the_estimator(case, tmp_path):
    loader, make = CASES[case]
    data = loader(as_frame=True)
    x, y = data.data, data.target
    estimator = _fit(make(), x, y)
    model = sheetnet.from_sklearn(estimator)
    ours = predict_outputs(model, x.to_numpy(dtype=float))
    # Oracle: scikit-learn's own predict_proba / predict; tolerance 1e-12 (common practice).
    if model.task == "regression":
        np.testing.assert_allclose(ours[:, 0], estimator.predict(x), rtol=1e-12, atol=1e-12)
    elif model.task == "binary":
        np.testing.assert_allclose(ours[:, 0], estimator.predict_proba(x)[:, 1], atol=1e-12)
    else:
        np.testing.assert_allclose(ours, estimator.predict_proba(x), atol=1e-12)
    saved = model.save(tmp_path / "m.json")
    assert sheetnet.load_model(saved).to_dict() == model.to_dict()


@pytest.mark.parametrize("case", sorted(CASES))
def test_sklearn_model_workbook_scores_match_the_estimator(case, tmp_path, run_cli):
    loader, make = CASES[case]
    data = loader(as_frame=True)
    frame = data.frame.sample(40, random_state=3)
    x, _y = frame[data.feature_names], frame["target"]
    estimator = _fit(make(), data.data, data.target)
    model = sheetnet.from_sklearn(estimator)
    model.save(tmp_path / "m.json")
    csv = tmp_path / "d.csv"
    frame.rename(columns={"target": "y"}).to_csv(csv, index=False)
    book = tmp_path / "b.xlsx"
    code, out, err = run_cli("build", "--model", tmp_path / "m.json", csv, "--epochs", "1", "-o", book)
    assert code == 0, err  # the default learning rate may diverge on large regression targets: then no record
    assert "training record of" in out or "no training record" in out
    report = verify(book)  # the embedded engine recomputes every cell from the formulas as written
    assert report.ok, report.comparisons[0].mismatches[:3]
    from tests.bookcheck import cached_values

    values = cached_values(book)
    header = next(k for k, v in values.items() if k[0] == "Scoring" and v == "case")
    expected = estimator.predict(x) if model.task == "regression" else estimator.predict_proba(x)[:, -1]
    output_header = next(k for k, v in values.items() if k[0] == "Scoring" and isinstance(v, str)
                         and v == f"a {model.outputs[-1]}")
    from openpyxl.utils.cell import coordinate_from_string

    col, row = coordinate_from_string(output_header[1])
    got = [values[("Scoring", f"{col}{row + 1 + i}")] for i in range(len(frame))]
    assert header
    # Recalculated workbook scores against the estimator: within 1e-9.
    np.testing.assert_allclose(got, expected, atol=1e-9, rtol=1e-9)


def test_unsupported_models_get_a_clear_message():
    from sklearn.linear_model import LogisticRegression

    with pytest.raises(UsageError, match="supported: MLPClassifier or MLPRegressor"):
        sheetnet.from_sklearn(_fit(LogisticRegression(), [[0.0], [1.0]], [0, 1]))
    with pytest.raises(UsageError, match="not fitted"):
        sheetnet.from_sklearn(MLPClassifier())


def test_frame_columns_name_the_inputs():
    x = pd.DataFrame({"width": [0.1, 0.9, 0.4, 0.7], "height": [1.0, 0.2, 0.5, 0.3]})
    estimator = MLPClassifier(hidden_layer_sizes=(2,), max_iter=50, random_state=0)
    model = sheetnet.from_sklearn(_fit(estimator, x, [0, 1, 0, 1]))
    assert model.inputs == ("width", "height") and model.classes == ("0", "1")
