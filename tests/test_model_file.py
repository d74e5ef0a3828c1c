"""The model file: round trip, validation messages that name the JSON path."""

from __future__ import annotations

import copy
import json

import numpy as np
import pytest

from sheetnet.errors import ModelFileError
from sheetnet.net.model import load_model, model_from_dict

GOOD = {
    "format": "sheetnet-model", "version": 1, "inputs": ["a", "b"], "outputs": ["yes"], "task": "binary",
    "classes": ["no", "yes"], "target": ["label"],
    "scaling": {"method": "standard", "offset": [1.0, 2.0], "scale": [0.5, 3.0]},
    "layers": [
        {"weights": [[0.1, 0.2], [0.3, -0.4], [0.5, 0.6]], "bias": [0.0, 0.1, -0.1],
         "activation": {"name": "sigmoid", "steepness": 2.0, "midpoint": 0.5}},
        {"weights": [[1.0, -1.0, 0.5]], "bias": [0.25], "activation": {"name": "sigmoid"}},
    ],
    "loss": "cross-entropy",
    "training": {"settings": {}, "seed": 0, "epochs": 0, "final_loss": 0.0, "data_sha256": ""},
}


def test_round_trip_is_exact(tmp_path):
    model = model_from_dict(GOOD)
    weights = np.array([[0.1 + 0.2, 1 / 3], [np.nextafter(1.0, 2.0), -7e-300], [1e300, 2.0**-1074]])
    model = model.with_layers((type(model.layers[0])(weights, model.layers[0].bias, model.layers[0].activation),
                               model.layers[1]))
    path = model.save(tmp_path / "m.json")
    again = load_model(path)
    assert again.to_dict() == model.to_dict()
    assert np.array_equal(again.layers[0].weights, weights)


def _broken(mutate):
    data = copy.deepcopy(GOOD)
    mutate(data)
    return data


@pytest.mark.parametrize(("mutate", "path"), [
    (lambda d: d["layers"][1]["weights"][0].append(1.0), "layers[1].weights[0]"),
    (lambda d: d["layers"][0]["weights"][2].__setitem__(1, "x"), "layers[0].weights[2][1]"),
    (lambda d: d["layers"][0]["bias"].pop(), "layers[0].bias"),
    (lambda d: d["layers"][0]["activation"].__setitem__("name", "swish"), "layers[0].activation"),
    (lambda d: d["layers"][0].__setitem__("activation", {"name": "softmax"}), "layers[0].activation.name"),
    (lambda d: d["scaling"]["scale"].__setitem__(0, 0), "scaling.scale[0]"),
    (lambda d: d.__setitem__("outputs", ["a", "b"]), "layers[1].weights"),
    (lambda d: d.__setitem__("format", "other"), "format"),
    (lambda d: d.__setitem__("version", 9), "version"),
    (lambda d: d.__setitem__("loss", "hinge"), "loss"),
    (lambda d: d["layers"][1].__setitem__("activation", {"name": "tanh", "steepness": 2}), "layers[1].activation"),
])
def test_validation_names_the_json_path(mutate, path):
    with pytest.raises(ModelFileError, match=r"^" + path.replace("[", r"\[").replace("]", r"\]").replace(".", r"\.")):
        model_from_dict(_broken(mutate))


def test_non_finite_numbers_are_refused(tmp_path):
    text = json.dumps(GOOD).replace("0.25", "NaN")
    (tmp_path / "m.json").write_text(text)
    with pytest.raises(ModelFileError, match="non-finite"):
        load_model(tmp_path / "m.json")


def test_missing_and_malformed_files(tmp_path):
    with pytest.raises(ModelFileError, match="not found"):
        load_model(tmp_path / "none.json")
    (tmp_path / "bad.json").write_text("{not json")
    with pytest.raises(ModelFileError, match="line 1"):
        load_model(tmp_path / "bad.json")
