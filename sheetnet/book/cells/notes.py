"""The notes on column headers: what the formulas below each header compute, in words."""

from __future__ import annotations

from sheetnet.book.spec import BookSpec


def column_note(spec: BookSpec, key: tuple, where: str) -> str:
    """In words, what the formulas below a header compute."""
    kind = key[0]
    notes = {
        "case": "Case number: the case's row in the data file (1 = its first data row)."
        if where == "scoring" else "Case number: the case this line uses, numbered as on the Scoring sheet "
                                   "(its row in the data file).",
        "set": "Whether the case was used for training or held out to check the model.",
        "raw": "Raw input value as in the data file (editable).",
        "target": "Target as in the data file (editable).",
        "t": "Target as a number for the loss: 1 when the case's label is this class, else 0."
        if where == "scoring" else "Target of this case, linked from the Scoring sheet.",
        "x": "Scaled input = (raw - offset) / divisor, with the constants on the Parameters sheet."
        if where == "scoring" else "Scaled input of this case, linked from the Scoring sheet.",
        "z": "Weighted sum: SUMPRODUCT of this unit's weight row and the layer's inputs, plus its bias"
        + (" (parameters in force: the previous step's updated values)." if where == "record" else "."),
        "a": "Activation of the weighted sum (the layer's activation function).",
        "smax": "Largest output weighted sum of the case, subtracted before EXP so softmax never overflows.",
        "ssum": "Sum of EXP(z - max) over the outputs: the softmax denominator.",
        "loss": _loss_note(spec),
        "pred": "Predicted class: probability against the decision threshold (binary) or the most probable class.",
        "correct": "1 when the prediction matches the target, else 0.",
        "d": "Delta = dE/dz. Output units: from the loss and the output activation. Hidden units: "
             "f'(z) times the sum of next-layer weights times their deltas.",
        "c": "This case's share of the weight gradient: delta of the unit times the input it receives.",
        "g": "Gradient of the step: mean over the step's cases of delta times input"
             + (", plus L2 penalty times the weight." if spec.record and spec.record.l2 else "."),
        "gb": "Bias gradient of the step: mean of the unit's deltas over the step's cases.",
        "v": "Velocity = momentum * previous velocity - learning_rate * gradient.",
        "vb": "Velocity = momentum * previous velocity - learning_rate * gradient.",
        "w": "Updated weight = weight in force - learning_rate * gradient"
             + (" (with momentum: + velocity)." if spec.record and spec.record.momentum else "."),
        "wb": "Updated bias = bias in force - learning_rate * gradient.",
        "step": "Update number: one update per batch of cases.",
        "epoch": "Pass over the training cases this line belongs to.",
        "accuracy": "Share of the epoch's cases classified right (outputs at 0.5) before each step's update.",
    }
    if where == "epochs" and kind == "loss":
        return "Mean of the training record's per-case loss over the epoch (before each step's update)."
    return notes.get(kind, "")


#: The loss column's note, by loss and by whether the output is a softmax.
LOSS_NOTES = {
    ("squared", False): "Loss of the case: 1/2 * sum over outputs of (target - output)^2.",
    ("squared", True): "Loss of the case: 1/2 * sum over outputs of (target - output)^2.",
    ("cross-entropy", True): "Cross-entropy: -sum over classes of target * LN(MAX(output, 1E-12)).",
    ("cross-entropy", False): "Cross-entropy: -sum over outputs of t*LN(MAX(y,1E-12)) + (1-t)*LN(MAX(1-y,1E-12)).",
}


def _loss_note(spec: BookSpec) -> str:
    return LOSS_NOTES[spec.loss, spec.softmax]
