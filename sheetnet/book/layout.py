"""Where everything lives in the workbook: a pure function of the :class:`BookSpec`.

The layout is the single source of truth: the writer walks it, the verifier and the auditor
regenerate every expected cell from it. Positions are 0-based :class:`Cell` / :class:`Block`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sheetnet.book.spec import BookSpec
from sheetnet.xlsx.addresses import Block, Cell

GUIDE = "Guide"
PARAMETERS = "Parameters"
CALCULATOR = "Calculator"
SCORING = "Scoring"
SETUP = "Training setup"
RECORD = "Training record"
EPOCHS = "Epochs"
LAYOUT = "sheetnet_layout"

Key = tuple
_FIRST_ROW = ("first row",)  # cached in SheetTable.index: SheetTable.cell is called for every cell of a large book
_new_cell = tuple.__new__


@dataclass(frozen=True)
class Column:
    """One column of a table: a semantic key (e.g. ``("z", 0, 2)``), its header and role."""

    key: Key
    header: str
    role: str  # "label", "input" or "formula"


@dataclass(frozen=True)
class SheetTable:
    """A header row and ``nrows`` data rows below it, columns from ``left`` on."""

    sheet: str
    header_row: int
    nrows: int
    columns: tuple[Column, ...]
    left: int = 0
    index: dict = field(default_factory=dict, compare=False, repr=False)

    def __post_init__(self) -> None:
        self.index.update({c.key: self.left + n for n, c in enumerate(self.columns)})
        self.index[_FIRST_ROW] = self.header_row + 1

    @property
    def first_row(self) -> int:
        return self.header_row + 1

    def has(self, key: Key) -> bool:
        return key in self.index

    def col(self, key: Key) -> int:
        return self.index[key]

    def cell(self, i: int, key: Key) -> Cell:
        index = self.index
        return _new_cell(Cell, (self.sheet, index[_FIRST_ROW] + i, index[key]))

    def span(self, i: int, first: Key, count: int) -> Block:
        """``count`` adjacent cells of row ``i`` starting at column ``first``."""
        return Block(self.sheet, self.first_row + i, self.index[first], 1, count)

    def column_block(self, key: Key, first: int = 0, count: int | None = None) -> Block:
        count = self.nrows - first if count is None else count
        return Block(self.sheet, self.first_row + first, self.index[key], count, 1)

    @property
    def block(self) -> Block:
        return Block(self.sheet, self.header_row, self.left, self.nrows + 1, len(self.columns))


@dataclass(frozen=True)
class ParamBlocks:
    """One set of layer matrices (weights units x fan_in, biases units x 1) and their titles."""

    weights: tuple[Block, ...]
    bias: tuple[Block, ...]
    titles: tuple[Cell, ...]


@dataclass(frozen=True)
class CalculatorLayout:
    raw: Block
    scaled: Block
    z: tuple[Block, ...]
    a: tuple[Block, ...]
    softmax_max: Cell | None
    softmax_sum: Cell | None
    predicted: Block | None
    layer_titles: tuple[Cell, ...]
    training_min: Block | None = None  # each input's range over the training rows (when the data was given)
    training_max: Block | None = None
    warning: Cell | None = None  # a sentence naming each input outside its training range


@dataclass(frozen=True)
class SummaryLayout:
    """Scoring summary cells (label in the column to the left of each value)."""

    count: Cell
    mean_loss: Cell | None
    accuracy: dict[str, Cell]
    rmse: tuple[Cell, ...]
    mae: tuple[Cell, ...]
    confusion: Block | None
    confusion_title: Cell | None


@dataclass(frozen=True)
class BookLayout:
    spec: BookSpec
    offset: Block
    divisor: Block
    class_labels: Block | None
    parameters: ParamBlocks
    threshold: Cell | None
    probability_clip: Cell | None
    target_cut: Cell | None
    calculator: CalculatorLayout
    scoring: SheetTable
    summary: SummaryLayout
    learning_rate: Cell | None
    momentum: Cell | None
    l2: Cell | None
    initial: ParamBlocks | None
    final: ParamBlocks | None
    record: SheetTable | None
    record_gap: Cell | None
    step_rows: tuple[tuple[int, int], ...]
    epochs: SheetTable | None

    def sheet_names(self) -> list[str]:
        """Every sheet of the workbook, in order: the one list the writer, verify and audit use."""
        names = [GUIDE, PARAMETERS, CALCULATOR] + ([SCORING] if self.spec.n_cases else [])
        if self.record is not None:
            names += [SETUP, RECORD, EPOCHS]
        return [*names, LAYOUT]

    def defined_names(self) -> dict[str, Block]:
        """Workbook-scoped names (never sheet-scoped: not every engine resolves those)."""
        calc = self.calculator
        names: dict[str, Block] = {"scale_offset": self.offset, "scale_divisor": self.divisor,
                                   "calculator_inputs": calc.raw}
        if calc.warning is not None:
            names.update(training_min=calc.training_min, training_max=calc.training_max,
                         calculator_warning=_one(calc.warning))
        if self.class_labels is not None:
            names["class_labels"] = self.class_labels
        for name in ("threshold", "probability_clip", "target_cut"):
            if getattr(self, name) is not None:
                names[name] = _one(getattr(self, name))
        for prefix, blocks in (("", self.parameters), ("init_", self.initial), ("final_", self.final)):
            if blocks is None:
                continue
            for k, (w, b) in enumerate(zip(blocks.weights, blocks.bias, strict=True)):
                names[f"{prefix}W_{k + 1}"] = w
                names[f"{prefix}b_{k + 1}"] = b
        for name, cell in (("learning_rate", self.learning_rate), ("momentum", self.momentum),
                           ("l2_penalty", self.l2), ("record_gap", self.record_gap)):
            if cell is not None:
                names[name] = _one(cell)
        return names


def _one(cell: Cell) -> Block:
    return Block(cell.sheet, cell.row, cell.col, 1, 1)


def param_blocks(spec: BookSpec, sheet: str, top: int) -> tuple[ParamBlocks, int]:
    """Each layer: a title row, a header row (sources, then "bias"), one row per unit."""
    weights, bias, titles = [], [], []
    row = top
    for k in range(spec.n_layers):
        titles.append(Cell(sheet, row, 0))
        fan_in, units = spec.fan_in(k), spec.units[k]
        weights.append(Block(sheet, row + 2, 1, units, fan_in))
        bias.append(Block(sheet, row + 2, 1 + fan_in, units, 1))
        row += 3 + units
    return ParamBlocks(tuple(weights), tuple(bias), tuple(titles)), row


def _calculator(spec: BookSpec) -> CalculatorLayout:
    n = len(spec.inputs)
    raw, scaled = Block(CALCULATOR, 3, 1, 1, n), Block(CALCULATOR, 4, 1, 1, n)
    z, a, titles = [], [], []
    row = 8
    smax = ssum = None
    for k in range(spec.n_layers):
        titles.append(Cell(CALCULATOR, row, 0))
        z.append(Block(CALCULATOR, row + 2, 1, 1, spec.units[k]))
        a.append(Block(CALCULATOR, row + 3, 1, 1, spec.units[k]))
        row += 5
    if spec.softmax:
        smax, ssum = Cell(CALCULATOR, row, 1), Cell(CALCULATOR, row + 1, 1)
        row += 3
    predicted = None
    if spec.task in ("binary", "multiclass"):
        predicted = Block(CALCULATOR, row, 1, 1, 1)
    elif spec.task == "multilabel":
        predicted = Block(CALCULATOR, row, 1, 1, len(spec.outputs))
    ranges = (Block(CALCULATOR, 5, 1, 1, n), Block(CALCULATOR, 6, 1, 1, n), Cell(CALCULATOR, 7, 1)) \
        if spec.input_ranges else (None, None, None)
    return CalculatorLayout(raw, scaled, tuple(z), tuple(a), smax, ssum, predicted, tuple(titles), *ranges)


def network_columns(spec: BookSpec) -> list[Column]:
    """z and activation columns of every layer (softmax helpers before the outputs)."""
    cols = []
    for k in range(spec.n_layers):
        names = spec.unit_names(k)
        cols += [Column(("z", k, j), f"z {name}", "formula") for j, name in enumerate(names)]
        if k == spec.n_layers - 1 and spec.softmax:
            cols += [Column(("smax",), "max z", "formula"), Column(("ssum",), "sum exp(z-max)", "formula")]
        cols += [Column(("a", k, j), f"a {name}", "formula") for j, name in enumerate(names)]
    return cols


def target_key(spec: BookSpec, k: int) -> Key:
    """The column holding the 0/1 or numeric target of output k in the Scoring table."""
    return ("t", k) if spec.encodes_targets else ("target", k)


def _scoring_columns(spec: BookSpec) -> list[Column]:
    cols = [Column(("case",), "case", "label"), Column(("set",), "set", "label")]
    cols += [Column(("raw", i), name, "input") for i, name in enumerate(spec.inputs)]
    cols += [Column(("target", c), name, "input") for c, name in enumerate(spec.target)]
    if spec.encodes_targets:
        cols += [Column(("t", k), f"t {name}", "formula") for k, name in enumerate(spec.outputs)]
    cols += [Column(("x", i), f"scaled {name}", "formula") for i, name in enumerate(spec.inputs)]
    cols += network_columns(spec)
    if spec.has_targets:
        cols.append(Column(("loss",), "loss", "formula"))
    if spec.task in ("binary", "multiclass"):
        cols.append(Column(("pred",), "predicted", "formula"))
    elif spec.task == "multilabel":
        cols += [Column(("pred", k), f"predicted {name}", "formula") for k, name in enumerate(spec.outputs)]
    if spec.has_targets and spec.is_classification:
        cols.append(Column(("correct",), "correct", "formula"))
    return cols


def _summary(spec: BookSpec, has_holdout: bool) -> tuple[SummaryLayout, int]:
    row = 2
    count = Cell(SCORING, row, 1)
    row += 1
    mean_loss = None
    accuracy: dict[str, Cell] = {}
    rmse: list[Cell] = []
    mae: list[Cell] = []
    confusion = confusion_title = None
    if spec.has_targets:
        mean_loss = Cell(SCORING, row, 1)
        row += 1
        if spec.is_classification:
            for name in ("all", "training", "holdout") if has_holdout else ("all",):
                accuracy[name] = Cell(SCORING, row, 1)
                row += 1
        else:
            for _ in spec.outputs:
                rmse.append(Cell(SCORING, row, 1))
                mae.append(Cell(SCORING, row + 1, 1))
                row += 2
        if spec.task in ("binary", "multiclass"):
            labels = len(spec.classes)
            confusion_title = Cell(SCORING, row + 1, 0)
            confusion = Block(SCORING, row + 3, 1, labels, labels)
            row += 3 + labels
    return SummaryLayout(count, mean_loss, accuracy, tuple(rmse), tuple(mae), confusion, confusion_title), row + 1


def _record_columns(spec: BookSpec) -> list[Column]:
    record = spec.record
    cols = [Column(("step",), "step", "label"), Column(("epoch",), "epoch", "label"),
            Column(("case",), "case", "label")]
    cols += [Column(("x", i), f"x {name}", "formula") for i, name in enumerate(spec.inputs)]
    cols += [Column(("t", k), f"t {name}", "formula") for k, name in enumerate(spec.outputs)]
    cols += network_columns(spec)
    cols.append(Column(("loss",), "loss", "formula"))
    if spec.is_classification:
        cols.append(Column(("correct",), "correct", "formula"))
    for k in reversed(range(spec.n_layers)):
        cols += [Column(("d", k, j), f"delta {name}", "formula") for j, name in enumerate(spec.unit_names(k))]
    if record.max_batch > 1:
        cols += _param_columns(spec, "c", "contribution ", bias=False)
    cols += _param_columns(spec, "g", "gradient ")
    if record.momentum:
        cols += _param_columns(spec, "v", "velocity ")
    cols += _param_columns(spec, "w", "")
    return cols


def _param_columns(spec: BookSpec, kind: str, prefix: str, bias: bool = True) -> list[Column]:
    """Per layer: W_k row by row (so each unit's weights are adjacent), then b_k."""
    cols = []
    for k in range(spec.n_layers):
        units, sources = spec.unit_names(k), spec.source_names(k)
        cols += [Column((kind, k, j, i), f"{prefix}W_{k + 1}({u},{s})", "formula")
                 for j, u in enumerate(units) for i, s in enumerate(sources)]
        if bias:
            cols += [Column((kind + "b", k, j), f"{prefix}b_{k + 1}({u})", "formula") for j, u in enumerate(units)]
    return cols


def _step_rows(spec: BookSpec) -> tuple[tuple[int, int], ...]:
    """(first record row, number of rows) of every step."""
    out, row = [], 0
    for cases in spec.record.steps:
        out.append((row, len(cases)))
        row += len(cases)
    return tuple(out)


def build_layout(spec: BookSpec) -> BookLayout:
    """Every block's position for this spec."""
    n = len(spec.inputs)
    offset, divisor = Block(PARAMETERS, 4, 1, 1, n), Block(PARAMETERS, 5, 1, 1, n)
    class_labels = Block(PARAMETERS, 7, 1, 1, len(spec.classes)) if spec.classes else None
    threshold = Cell(PARAMETERS, 9, 1) if spec.is_classification else None
    probability_clip = Cell(PARAMETERS, 10, 1) if spec.loss == "cross-entropy" else None
    target_cut = Cell(PARAMETERS, 11, 1) if spec.task in ("binary", "multilabel") else None
    parameters, _ = param_blocks(spec, PARAMETERS, 13)
    calculator = _calculator(spec)
    has_holdout = "holdout" in spec.sets
    summary, table_top = _summary(spec, has_holdout)
    scoring = SheetTable(SCORING, table_top, spec.n_cases, tuple(_scoring_columns(spec)))
    record = initial = final = epochs = lr = momentum = l2 = record_gap = None
    step_rows: tuple[tuple[int, int], ...] = ()
    if spec.record is not None:
        lr = Cell(SETUP, 2, 1)
        momentum = Cell(SETUP, 3, 1) if spec.record.momentum else None
        l2 = Cell(SETUP, 4, 1) if spec.record.l2 else None
        record_gap = Cell(SETUP, 5, 1)
        initial, row = param_blocks(spec, SETUP, 7)
        final, _ = param_blocks(spec, SETUP, row + 2)
        record = SheetTable(RECORD, 2, spec.record.n_rows, tuple(_record_columns(spec)))
        step_rows = _step_rows(spec)
        epoch_cols = [Column(("epoch",), "epoch", "label"), Column(("loss",), "mean loss", "formula")]
        if spec.is_classification:
            epoch_cols.append(Column(("accuracy",), "accuracy", "formula"))
        epochs = SheetTable(EPOCHS, 2, spec.record.n_epochs, tuple(epoch_cols))
    return BookLayout(spec=spec, offset=offset, divisor=divisor, class_labels=class_labels, parameters=parameters,
                      threshold=threshold, probability_clip=probability_clip, target_cut=target_cut,
                      calculator=calculator, scoring=scoring, summary=summary,
                      learning_rate=lr, momentum=momentum, l2=l2, initial=initial, final=final, record=record,
                      record_gap=record_gap,
                      step_rows=step_rows, epochs=epochs)
