"""The Guide sheet's text: what each sheet holds, how to read the record, styles, names,
provenance and the caution about what a reproducing workbook does not prove."""

from __future__ import annotations

from sheetnet.book import layout as L
from sheetnet.book.layout import BookLayout
from sheetnet.xlsx.addresses import Block, defined_name_target


def caution(subject: str) -> str:
    """The caution every output that can affect people carries, after what it is (``subject``)."""
    return (f"{subject}; it does not validate the model. Where its outputs affect people (credit, hiring, "
            "safety and the like), follow your organisation's model-risk policy and local regulation, and have "
            "the model reviewed by qualified people before relying on it.")


CAUTION = caution("This workbook reproduces a model's arithmetic")


def _name_meaning(name: str) -> str:
    kind, _, layer = name.rpartition("_")
    meanings = {
        "W": f"weights of layer {layer} (rows: units, columns: what feeds them) used by the calculator and scoring",
        "b": f"biases of layer {layer} (one per unit) used by the calculator and scoring",
        "init_W": f"initial weights of layer {layer}, where the training record starts",
        "init_b": f"initial biases of layer {layer}, where the training record starts",
        "final_W": f"weights of layer {layer} after the last step of the training record (formulas)",
        "final_b": f"biases of layer {layer} after the last step of the training record (formulas)",
    }
    fixed = {
        "scale_offset": "input scaling offsets: scaled = (raw - offset) / divisor",
        "scale_divisor": "input scaling divisors",
        "class_labels": "class labels, in the order of the output units",
        "threshold": "decision threshold: a probability at or above it predicts the positive class",
        "learning_rate": "learning rate of every update in the training record",
        "momentum": "momentum of the updates in the training record",
        "l2_penalty": "L2 penalty added to every weight gradient in the training record",
        "probability_clip": "smallest probability inside LN in the cross-entropy (a constant; do not edit)",
        "target_cut": "a target at or above it counts as the positive class when accuracy is counted (a constant)",
        "calculator_inputs": "the Calculator's raw inputs, where a case is typed",
        "training_min": "each input's smallest value in the training rows",
        "training_max": "each input's largest value in the training rows",
        "calculator_warning": "names each Calculator input that is blank, not a number, or outside its training "
                              "range (empty when none is)",
        "record_gap": "largest |parameter after the record's last step - parameter in use|: 0 (to rounding) when "
                      "the record replays the whole run that produced the Parameters",
    }
    return fixed.get(name) or meanings.get(kind, "")


def _scoring_line(spec) -> str:
    """What the Scoring sheet holds, for the data it was built from (a target or none; classes or values;
    every case or a sample)."""
    if spec.case_rows:
        return (f"A sample of the data: {spec.n_cases:,} cases, each numbered by its row in the data file (see "
                "'scoring' under Provenance), one formula row per case; its summary is over the sample only.")
    if not spec.has_targets:
        return ("The data, one formula row per case (scaled inputs, every unit, outputs, prediction) and the "
                "number of cases; the data has no target column, so there is no loss or accuracy.")
    if not spec.is_classification:
        return ("The data, one formula row per case (scaled inputs, every unit, outputs, prediction, loss) and a "
                "summary with the mean loss, RMSE and MAE.")
    return ("The data, one formula row per case (scaled inputs, every unit, outputs, prediction, correct or not) "
            "and a summary with accuracy and loss.")


def _sheet_lines(layout: BookLayout) -> list[tuple[str, str, str]]:
    lines = [("label", L.PARAMETERS, "Scaling constants and each layer's weights and biases (editable inputs)."),
             ("label", L.CALCULATOR, "One case: type raw inputs; every weighted sum, activation and the prediction "
                                    "follow as formulas.")]
    if layout.spec.n_cases:
        lines.append(("label", L.SCORING, _scoring_line(layout.spec)))
    if layout.record is not None:
        lines += [
            ("label", L.SETUP, "Learning rate, initial parameters (editable) and the parameters after the record's "
                               "last step (formulas)."),
            ("label", L.RECORD, "Training replayed from the initial parameters: one row per case of every step."),
            ("label", L.EPOCHS, "Mean loss and accuracy per epoch of the record, with a line chart of the loss."),
        ]
    lines.append(("label", L.LAYOUT, "Hidden: a machine-readable description of this layout, used by "
                                     "'sheetnet verify' and 'sheetnet audit'. Do not edit."))
    return lines


def _record_lines(layout: BookLayout) -> list[tuple[str, str, str]]:
    if layout.record is None:
        return []
    momentum = " With momentum, a velocity column per parameter is updated first." if layout.momentum else ""
    banner = [("title", "Training record", layout.spec.record_note)] if layout.spec.record_note else []
    return [
        *banner,
        ("title", "Reading one row of the training record", ""),
        ("text", "", "Left to right: step, epoch and case; the case's scaled inputs and targets (linked from "
                     "Scoring); every unit's weighted sum z and activation a, computed with the parameters in force "
                     "(the previous step's updated values, or the initial parameters for step 1); the case's loss; "
                     "the deltas dE/dz, output units first."),
        ("text", "", "When a step uses several cases, each case's row also holds its contributions delta x input; "
                     "the step's last row holds the mean gradients and every updated parameter = parameter in force "
                     "- learning_rate x gradient." + momentum),
        ("text", "", "Change learning_rate or any initial parameter and the whole record, the final parameters "
                     "and the loss chart recompute."),
    ]


SCALING_TEXT = {"standard": "standard: offset = mean, divisor = population standard deviation of the training rows",
                "minmax": "min-max: offset = minimum, divisor = maximum - minimum of the training rows",
                "given": "as the model states them (a scaler read from an ONNX graph): scaled = (raw - offset) / "
                         "divisor",
                "none": "none: offset 0, divisor 1"}


def _provenance_lines(layout: BookLayout) -> list[tuple[str, str, str]]:
    lines = [("title", "Provenance", "")]
    lines += [("label", key, value) for key, value in layout.spec.provenance]
    lines.append(("label", "input scaling", SCALING_TEXT[layout.spec.scaling_method]))
    return lines


def guide_lines(layout: BookLayout, names: dict[str, Block]) -> list[tuple[str, str, str]]:
    """(role of the left cell, left text, right text) for each row of the Guide sheet."""
    spec = layout.spec
    arch = " -> ".join([f"{len(spec.inputs)} inputs", *(f"{u} {a.name}" for u, a in
                                                       zip(spec.units, spec.activations, strict=True))])
    lines = [
        ("title", "sheetnet workbook", f"{spec.task} network: {arch}; loss: {spec.loss}"),
        ("text", "", "Every number below the inputs is an ordinary formula: click a cell to see how it is made. "
                     "No macros, add-ins or links to other files."),
        ("title", "Caution", ""),
        ("text", "", CAUTION),
        ("title", "Sheets", ""),
        *_sheet_lines(layout),
        *_record_lines(layout),
        ("title", "Cell styles", ""),
        ("input", "1.234567", "Editable input: parameters, data, learning rate, threshold, calculator inputs."),
        ("formula", "=formula", "Formula: computed from other cells; do not type over it."),
        ("header", "header", "Column header; its note says in words what the formulas below it compute."),
        ("title", "Defined names (workbook scope)", ""),
    ]
    lines += [("label", name, f"{defined_name_target(block)[1:]}: {_name_meaning(name)}")
              for name, block in names.items()]
    return lines + _provenance_lines(layout)
