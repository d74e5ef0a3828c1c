"""The estimators follow scikit-learn's contract (its own check suite is the oracle) and write workbooks."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.datasets import load_iris
from sklearn.utils.estimator_checks import parametrize_with_checks

from sheetnet import SheetNetClassifier, SheetNetRegressor
from sheetnet.checks.verify import verify


@parametrize_with_checks([SheetNetClassifier(n_epochs=30), SheetNetRegressor(n_epochs=30)])
def test_scikit_learn_estimator_checks(estimator, check):
    # Outside check: scikit-learn's check_estimator suite (sklearn.utils.estimator_checks). None is skipped by us;
    # scikit-learn itself skips its array-API checks unless SCIPY_ARRAY_API is set.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        check(estimator)


def test_classifier_learns_iris_and_writes_a_workbook_that_verifies(tmp_path):
    # Data: iris as shipped by scikit-learn (Fisher 1936).
    x, y = load_iris(return_X_y=True)
    rng = np.random.default_rng(0)
    order = rng.permutation(len(x))
    train, test = order[:110], order[110:]
    estimator = SheetNetClassifier(hidden_layer_sizes=(6,), n_epochs=150, learning_rate=0.1, random_state=3)
    estimator.fit(x[train], y[train])
    assert estimator.score(x[test], y[test]) >= 0.9  # holdout floor 0.90 (common practice)
    probabilities = estimator.predict_proba(x[test])
    np.testing.assert_allclose(probabilities.sum(axis=1), 1.0, atol=1e-12)
    assert clone(estimator).get_params() == estimator.get_params()
    book = estimator.to_workbook(tmp_path / "iris.xlsx", x[train][:12], y[train][:12], trace_epochs=1)
    assert verify(book).ok


def test_regressor_predicts_and_rejects_unfitted_use():
    x = np.linspace(-1, 1, 40)[:, None]
    y = 0.5 * x[:, 0] - 0.2
    estimator = SheetNetRegressor(hidden_layer_sizes=(), n_epochs=200, learning_rate=0.05, scaling="none")
    from sklearn.exceptions import NotFittedError

    with pytest.raises(NotFittedError):
        estimator.predict(x)
    estimator.fit(x, y)
    # A single linear unit trained on an exactly linear target recovers it (common practice).
    np.testing.assert_allclose(estimator.predict(x), y, atol=1e-3)
    assert len(estimator.loss_curve_) == 200 and estimator.coefs_[0].shape == (1, 1)
