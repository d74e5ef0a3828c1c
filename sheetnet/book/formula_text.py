"""Pure builders of formula text, one per kind of cell, over a small shared vocabulary.

Arguments are reference texts already rendered by ``addresses``; results start with ``=``.
Only functions that Excel, LibreOffice and the ``formulas`` package all evaluate the same way
are used: SUMPRODUCT, SUMXMY2, AVERAGE, AVERAGEIFS, COUNT, COUNTIFS, EXP, LN, TANH, MAX, IF,
INDEX, MATCH, SQRT, ABS. Every form mirrors the trainer's arithmetic (same stable sigmoid and
softmax, same probability clip) so both agree to rounding.
"""

from __future__ import annotations

from sheetnet.net.activations import Activation


def number(value: float) -> str:
    """A float literal that round-trips exactly (17 significant digits where needed)."""
    text = repr(float(value)).upper()
    if text.endswith(".0"):
        text = text[:-2]
    return f"({text})" if text.startswith("-") else text


def text_literal(value: str) -> str:
    """A string literal: quotes doubled, so data text can never become formula code."""
    return '"' + value.replace('"', '""') + '"'


def label_literal(label: str) -> str:
    """A class label as it is stored in the data: a number when it reads as one, else text."""
    try:
        return number(float(label))
    except ValueError:
        return text_literal(label)


#: The probability clip and the target cut are named cells on the Parameters sheet (PROBABILITY_CLIP and
#: TARGET_CUT in net.activations hold their values): no formula carries them as literals.
CLIP = "probability_clip"
CUT = "target_cut"


def reference(source: str) -> str:
    """A plain link to another cell."""
    return f"={source}"


def scaled_input(raw: str, offset: str, divisor: str) -> str:
    return f"=({raw}-{offset})/{divisor}"


def weighted_sum(weights: str, inputs: str, bias: str) -> str:
    """z = SUMPRODUCT(weight row, input row) + bias."""
    return f"=SUMPRODUCT({weights},{inputs})+{bias}"


def _sigmoid_argument(act: Activation, z: str) -> str:
    if act.steepness == 1.0 and act.midpoint == 0.0:
        return z
    return f"({number(act.steepness)}*({z}-{number(act.midpoint)}))"


def _sigmoid_text(act: Activation, z: str) -> str:
    u = _sigmoid_argument(act, z)
    return f"=IF({u}>=0,1/(1+EXP(-{u})),EXP({u})/(1+EXP({u})))"


#: a = f(z) per activation as formula text (softmax takes the row's maximum and sum cells too).
ACTIVATION_TEXT = {
    "sigmoid": lambda act, z, m, s: _sigmoid_text(act, z),
    "tanh": lambda act, z, m, s: f"=TANH({z})",
    "relu": lambda act, z, m, s: f"=MAX({z},0)",
    "identity": lambda act, z, m, s: f"={z}",
    "step": lambda act, z, m, s: f"=IF({z}>={number(act.midpoint)},1,0)",
    "softmax": lambda act, z, m, s: f"=EXP({z}-{m})/{s}",
}


def activation(act: Activation, z: str, softmax_max: str = "", softmax_sum: str = "") -> str:
    """a = f(z); the sigmoid in its two-branch form that never overflows."""
    return ACTIVATION_TEXT[act.name](act, z, softmax_max, softmax_sum)


def softmax_max(z_range: str) -> str:
    return f"=MAX({z_range})"


def softmax_sum(z_range: str, max_cell: str) -> str:
    return f"=SUMPRODUCT(EXP({z_range}-{max_cell}))"


def _sigmoid_derivative(act: Activation, a: str) -> str:
    core = f"{a}*(1-{a})"
    return core if act.steepness == 1.0 else f"{number(act.steepness)}*{core}"


#: f'(z) per trainable activation as an expression (no ``=``), written from the activation where it can be.
DERIVATIVE_TEXT = {
    "sigmoid": lambda act, z, a: _sigmoid_derivative(act, a),
    "tanh": lambda act, z, a: f"(1-{a}^2)",
    "relu": lambda act, z, a: f"IF({z}>0,1,0)",
    "identity": lambda act, z, a: "1",
}


def derivative(act: Activation, z: str, a: str) -> str:
    """f'(z) as an expression (no ``=``), written from the activation where it can be."""
    rule = DERIVATIVE_TEXT.get(act.name)
    if rule is None:
        raise ValueError(f"no derivative formula for {act.name!r}")
    return rule(act, z, a)


def _cross_entropy_delta(act: Activation, z: str, y: str, t: str, y_range: str, t_range: str) -> str:
    if act.name == "sigmoid" and act.steepness != 1.0:
        return f"={number(act.steepness)}*({y}-{t})"
    if act.name in ("sigmoid", "softmax"):
        return f"={y}-{t}"
    slope = (f"(-{t}/MAX({y},{CLIP})*IF({y}>{CLIP},1,0)"
             f"+(1-{t})/MAX(1-{y},{CLIP})*IF(1-{y}>{CLIP},1,0))")
    factor = derivative(act, z, y)
    return f"={slope}" if factor == "1" else f"={factor}*{slope}"


def _squared_delta(act: Activation, z: str, y: str, t: str, y_range: str, t_range: str) -> str:
    if act.name == "softmax":
        return f"={y}*(({y}-{t})-SUMPRODUCT({y_range}-{t_range},{y_range}))"
    if act.name == "identity":
        return f"={y}-{t}"
    return f"={derivative(act, z, y)}*({y}-{t})"


def output_delta(loss: str, act: Activation, z: str, y: str, t: str, y_range: str = "", t_range: str = "") -> str:
    """dE/dz of one output unit; canonical pairs reduce to y - t (times the sigmoid steepness)."""
    return OUTPUT_DELTA_TEXT[loss](act, z, y, t, y_range, t_range)


def hidden_delta(act: Activation, z: str, a: str, terms: list[tuple[str, str]]) -> str:
    """delta_j = f'(z_j) * sum_k w_kj delta_k, with the sum written out term by term."""
    total = "+".join(f"{w}*{d}" for w, d in terms)
    factor = derivative(act, z, a)
    return f"=({total})" if factor == "1" else f"={factor}*({total})"


def _squared_loss(act: Activation, ys: list[str], ts: list[str], y_range: str, t_range: str) -> str:
    return f"=SUMXMY2({t_range},{y_range})/2"


def _cross_entropy_loss(act: Activation, ys: list[str], ts: list[str], y_range: str, t_range: str) -> str:
    if act.name == "softmax":
        terms = [f"{t}*LN(MAX({y},{CLIP}))" for y, t in zip(ys, ts, strict=True)]
    else:
        terms = [f"{t}*LN(MAX({y},{CLIP}))+(1-{t})*LN(MAX(1-{y},{CLIP}))" for y, t in zip(ys, ts, strict=True)]
    return "=-(" + "+".join(terms) + ")"


#: The spreadsheet twins of ``net.activations.SAMPLE_LOSSES`` and ``OUTPUT_DELTAS``.
LOSS_TEXT = {"squared": _squared_loss, "cross-entropy": _cross_entropy_loss}
OUTPUT_DELTA_TEXT = {"squared": _squared_delta, "cross-entropy": _cross_entropy_delta}


def loss(kind: str, act: Activation, ys: list[str], ts: list[str], y_range: str, t_range: str) -> str:
    """Per-case loss: 1/2 sum (t-y)^2, or cross-entropy with the probability clip inside LN."""
    return LOSS_TEXT[kind](act, ys, ts, y_range, t_range)


#: Inputs named one by one in the warning up to this many (a formula stays far below the 8,192-character
#: limit); beyond, the warning counts them.
WARNING_NAMES = 20


def input_warning(items: list[tuple[str, str, str, str]], raw: str, low: str, high: str) -> str:
    """A sentence naming each calculator input (name, raw cell, training min, training max) that is not
    a number or lies outside its training range; empty when none does. Ranges for the count form."""
    if len(items) > WARNING_NAMES:
        outside = f"SUMPRODUCT(({raw}<{low})+({raw}>{high})+(1-ISNUMBER({raw})))"
        return f'=IF({outside}=0,"",{outside}&{text_literal(" input(s) not numbers or outside the training range")})'
    parts = [f"IF(ISNUMBER({cell}),IF({cell}<{lo},{text_literal(name + WARN_BELOW)},IF({cell}>{hi},"
             f"{text_literal(name + WARN_ABOVE)},{text_literal('')})),{text_literal(name + WARN_NOT_NUMBER)})"
             for name, cell, lo, hi in items]
    return "=" + "&".join(parts)


WARN_BELOW = " is below its training range; "
WARN_ABOVE = " is above its training range; "
WARN_NOT_NUMBER = " is blank or not a number; "


def record_gap(pairs: list[tuple[str, str]]) -> str:
    """The largest |a - b| over pairs of equally shaped ranges (SUMPRODUCT evaluates the array in every
    application, so no array entry is needed)."""
    return "=MAX(" + ",".join(f"SUMPRODUCT(MAX(ABS({a}-{b})))" for a, b in pairs) + ")"


def correct(task: str, ys: list[str], ts: list[str], y_range: str, t_range: str, threshold: str = CUT) -> str:
    """1 when the case is classified right: arg-max match (multiclass) or every output on the
    same side of the threshold as its target (binary, multilabel)."""
    if task == "multiclass":
        return f"=IF(MATCH(MAX({y_range}),{y_range},0)=MATCH(MAX({t_range}),{t_range},0),1,0)"
    sides = [f"IF(({y}>={threshold})=({t}>={CUT}),1,0)" for y, t in zip(ys, ts, strict=True)]
    return "=" + "*".join(sides)


def encode_label(label_cell: str, index: int) -> str:
    """1 when the case's label is the ``index``-th class label (1-based, as INDEX counts), else 0."""
    return f"=IF({label_cell}=INDEX(class_labels,{index}),1,0)"


def predicted_binary(p: str, threshold: str) -> str:
    """The positive class label (the second) when the probability reaches the threshold, else the first."""
    return f"=IF({p}>={threshold},INDEX(class_labels,2),INDEX(class_labels,1))"


def predicted_multiclass(y_range: str, labels: str) -> str:
    return f"=INDEX({labels},MATCH(MAX({y_range}),{y_range},0))"


def predicted_flag(p: str, threshold: str) -> str:
    return f"=IF({p}>={threshold},1,0)"


def contribution(delta: str, source: str) -> str:
    """One case's share of a weight gradient: delta_j * a_i."""
    return f"={delta}*{source}"


def gradient(mean_of: str, weight: str = "", l2: str = "") -> str:
    """A step's gradient: the delta-times-input (batch of 1) or the AVERAGE of contributions,
    plus the L2 term on weights."""
    penalty = f"+{l2}*{weight}" if l2 and weight else ""
    return f"={mean_of}{penalty}"


def velocity(previous: str, grad: str, lr: str, momentum: str) -> str:
    """v = momentum * v_prev - lr * g (v_prev empty on the first step)."""
    return f"={momentum}*{previous}-{lr}*{grad}" if previous else f"=-{lr}*{grad}"


def update(previous: str, grad: str, lr: str) -> str:
    """w_new = w_prev - lr * g."""
    return f"={previous}-{lr}*{grad}"


def update_with_velocity(previous: str, vel: str) -> str:
    return f"={previous}+{vel}"


def average(range_text: str) -> str:
    return f"=AVERAGE({range_text})"


def average_if(values: str, criteria_range: str, criterion: str) -> str:
    return f"=AVERAGEIFS({values},{criteria_range},{text_literal(criterion)})"


def count(range_text: str) -> str:
    return f"=COUNT({range_text})"


def count_pairs(true_range: str, true_criterion: str, pred_range: str, pred_criterion: str) -> str:
    return f"=COUNTIFS({true_range},{true_criterion},{pred_range},{pred_criterion})"


def rmse(pred_range: str, target_range: str) -> str:
    return f"=SQRT(SUMXMY2({pred_range},{target_range})/COUNT({target_range}))"


def mae(pred_range: str, target_range: str) -> str:
    return f"=SUMPRODUCT(ABS({pred_range}-{target_range}))/COUNT({target_range})"
