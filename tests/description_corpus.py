"""Altered layout descriptions: name -> a mutation of the parsed description (see tests/tamper.py).

Each models what someone who can edit a returned workbook could do to the hidden description:
sizes beyond what the sheets hold, positions outside the sheet, wrong types, non-finite numbers,
deep nesting, huge lists, unknown versions, shapes that disagree, names that disagree."""

from __future__ import annotations

import json
import random


def _in_place(change):
    """A mutation from a function that changes the parsed description in place."""

    def mutate(data: dict) -> dict:
        change(data)
        return data

    return mutate


def _set(path: str, value):
    """A mutation that sets one JSON path ("spec.units.0") to ``value``."""

    @_in_place
    def mutate(data: dict) -> None:
        *parents, last = path.split(".")
        node = data
        for key in parents:
            node = node[int(key)] if isinstance(node, list) else node[key]
        if isinstance(node, list):
            node[int(last)] = value
        else:
            node[last] = value

    return mutate


def _nested(depth: int) -> str:
    return "[" * depth + "]" * depth


@_in_place
def _huge_steps(data: dict) -> None:
    data["spec"]["record"]["steps"] = [[0]] * 300_000
    data["spec"]["record"]["epochs"] = [1] * 300_000


@_in_place
def _many_inputs(data: dict) -> None:
    data["spec"]["inputs"] = [f"x{i}" for i in range(200_000)]


@_in_place
def _first_layer_units(data: dict) -> None:
    data["spec"]["units"][0] = 10_000_000


@_in_place
def _shapes_disagree(data: dict) -> None:
    data["spec"]["units"][0] += 1  # the stored parameters still have the old shape


@_in_place
def _outputs_disagree(data: dict) -> None:
    data["spec"]["outputs"] = ["a", "b", "c"]


@_in_place
def _names_disagree(data: dict) -> None:
    data["names"]["W_1"]["top"] += 40


def _deep_record(data: dict) -> str:
    return json.dumps(data)[:-1] + ',"extra":' + _nested(100_000) + "}"


@_in_place
def _case_out_of_range(data: dict) -> None:
    data["spec"]["record"]["steps"][0] = [10**9]


CASES = {
    "units 10,000,000": _first_layer_units,
    "case count 10^9": _set("spec.n_cases", 10**9),
    "200,000 input names": _many_inputs,
    "300,000 record steps": _huge_steps,
    "negative block position": _set("names.W_1.top", -5),
    "block past the sheet's end": _set("names.b_1.top", 2_000_000),
    "original learning rate NaN": _set("inputs.learning_rate", float("nan")),
    "original weight infinite": _set("inputs.layers.0.weights.0.0", float("inf")),
    "units as text": _set("spec.units.0", "three"),
    "units zero": _set("spec.units.0", 0),
    "units fractional": _set("spec.units.0", 2.5),
    "loss unknown": _set("spec.loss", "hinge"),
    "activation unknown": _set("spec.activations.0.name", "swish"),
    "steepness infinite": _set("spec.activations.0.steepness", float("inf")),
    "task unknown": _set("spec.task", "ranking"),
    "version unknown": _set("version", 99),
    "spec missing": _in_place(lambda d: d.pop("spec")),
    "description a list": lambda d: [d],
    "deep nesting": _deep_record,
    "shapes disagree": _shapes_disagree,
    "outputs disagree": _outputs_disagree,
    "names disagree with the layout": _names_disagree,
    "record case out of range": _case_out_of_range,
    "case rows out of order": _in_place(lambda d: d["spec"].__setitem__(
        "case_rows", list(range(d["spec"]["n_cases"], 0, -1)))),
    "case rows too few": _set("spec.case_rows", [1, 2]),
    "input range upside down": _in_place(lambda d: d["spec"].__setitem__(
        "input_ranges", [[1.0, 0.0]] * len(d["spec"]["inputs"]))),
    "sets length wrong": _in_place(lambda d: d["spec"]["sets"].pop()),
    "epochs out of order": _in_place(lambda d: d["spec"]["record"]["epochs"].reverse()),
    "stored data rows missing": _in_place(lambda d: d["inputs"].__setitem__("data", d["inputs"]["data"][:3])),
    "huge string": _set("spec.provenance", [["note", "".join(random.Random(1).choices("abcdefgh", k=3_000_000))]]),
    "not JSON": lambda d: "{" + json.dumps(d)[1:-1],
    "fingerprints a list": _set("fingerprints", [["formulas"], ["inputs"]]),
    "input name with control characters": _set("spec.inputs.0", "nul\x00bell\x07"),
    "input name with an unpaired surrogate": _set("spec.inputs.0", "\ud800x"),
    "version true": _set("version", True),
    "a key twice in one object": lambda d: json.dumps(d).replace('"spec":', '"spec": {}, "spec":', 1),
}
