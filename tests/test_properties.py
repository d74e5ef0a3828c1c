"""Property-based tests (hypothesis): model files round-trip, and any finite network with finite data
gives a workbook whose every formula the embedded engine reproduces within 1e-9."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sheetnet.book.build import from_model, write_workbook
from sheetnet.book.sizing import Requested
from sheetnet.checks.verify import verify
from sheetnet.net.activations import Activation
from sheetnet.net.data import DataTable
from sheetnet.net.model import Layer, Model, Scaling, load_model
from sheetnet.net.train import TrainSettings
from sheetnet.xlsx.reader import read_workbook

finite = st.floats(min_value=-1e4, max_value=1e4, allow_nan=False, allow_infinity=False)
hidden_acts = st.sampled_from([Activation("sigmoid"), Activation("tanh"), Activation("relu"), Activation("identity"),
                               Activation("sigmoid", 3.0, -0.5)])


@st.composite
def networks(draw) -> Model:
    n_in = draw(st.integers(1, 3))
    sizes = [n_in, *draw(st.lists(st.integers(1, 3), min_size=0, max_size=2))]
    kind = draw(st.sampled_from(["binary", "regression", "multiclass"]))
    n_out = 3 if kind == "multiclass" else 1
    output = {"binary": Activation("sigmoid"), "regression": Activation("identity"),
              "multiclass": Activation("softmax")}[kind]
    acts = [draw(hidden_acts) for _ in sizes[1:]] + [output]
    sizes.append(n_out)
    layers = tuple(Layer(np.array(draw(st.lists(st.lists(finite, min_size=a, max_size=a), min_size=b, max_size=b))),
                         np.array(draw(st.lists(finite, min_size=b, max_size=b))), f)
                   for a, b, f in zip(sizes[:-1], sizes[1:], acts, strict=True))
    classes = ("c0", "c1", "c2") if kind == "multiclass" else ("0", "1") if kind == "binary" else ()
    outputs = classes if kind == "multiclass" else ("y",)
    return Model(inputs=tuple(f"x{i}" for i in range(n_in)), outputs=outputs, task=kind, layers=layers,
                 loss="squared" if kind == "regression" else "cross-entropy",
                 scaling=Scaling("standard", np.zeros(n_in), np.ones(n_in)), target=("y",), classes=classes)


@given(networks())
@settings(max_examples=40, deadline=None)
def test_model_file_round_trips(tmp_path_factory, model):
    path = tmp_path_factory.mktemp("m") / "m.json"
    model.save(path)
    again = load_model(path)
    assert again.to_dict() == model.to_dict()


def _table(model: Model, rows: list[list[float]], labels: list) -> DataTable:
    header = (*model.inputs, "y")
    body = tuple((*tuple(repr(v) for v in row[:len(model.inputs)]), str(label)) for row, label in
                 zip(rows, labels, strict=True))
    return DataTable(source="generated.csv", header=header, rows=body, lines=tuple(range(2, len(body) + 2)))


@given(networks(), st.data())
@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                  HealthCheck.too_slow])
def test_any_finite_network_gives_a_workbook_that_verifies(tmp_path_factory, model, data):
    rows = data.draw(st.lists(st.lists(finite, min_size=3, max_size=3), min_size=2, max_size=4))
    if model.task == "multiclass":
        labels = [("c0", "c1", "c2")[i % 3] for i in range(len(rows))]
    elif model.task == "binary":
        labels = [i % 2 for i in range(len(rows))]
    else:
        labels = [data.draw(finite) for _ in rows]
    settings_ = TrainSettings(learning_rate=1e-6, epochs=1, batch_size=2, shuffle=False)
    plan = from_model(model, _table(model, rows, labels), settings_, Requested(), max_cells=10**8)
    spec, inputs = plan.spec, plan.inputs
    path = tmp_path_factory.mktemp("b") / "b.xlsx"
    write_workbook(spec, inputs, path)
    formulas = [f for cells in read_workbook(path).sheets.values() for f in cells.formulas.values()]
    # Microsoft Support, "Excel specifications and limits": at most 8,192 characters per formula.
    assert formulas and max(len(f) + 1 for f in formulas) <= 8192
    report = verify(path)
    comparison = report.comparisons[0]
    assert not comparison.errors, comparison.errors[:3]
    assert report.ok, (comparison.formula_differences[:2], comparison.mismatches[:3])
