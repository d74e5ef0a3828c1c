"""The embedded recalculation engine: every formula of a workbook, from the text as written.

It knows nothing about networks. Speed comes from three things:

* cells whose formulas are the same up to row offsets share one *template* (key: the formula
  with row numbers blanked, plus the row offsets), which is parsed and compiled to a Python
  function of the host row once;
* a template made only of operators and the functions in ``xlfuncs.FAST_FUNCTIONS`` is compiled
  to straight Python over floats (the fast path); anything else is evaluated per cell by the
  `formulas` package (the general path) and reported as such;
* cells are computed in sheet and row order, and a cell that needs a formula not yet computed
  raises ``NotReady``; the scheduler computes that one first (an explicit stack, so chains of a
  million cells need no recursion).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from operator import itemgetter

from openpyxl.formula.tokenizer import Token, Tokenizer

from sheetnet.book.addresses import column_index
from sheetnet.book.xlsxread import CellError, Workbook
from sheetnet.engines import xlfuncs as xf
from sheetnet.errors import EvaluationError

WIDTH = 16_384  # cell key = row * WIDTH + col
_MISSING = object()
_KEY = re.compile(r"""("(?:[^"]|"")*")|((?:'(?:[^']|'')+'|[A-Za-z_][\w.]*)!)?(\$?[A-Z]{1,3})(\$?)([0-9]+)(?![\w(!])""")
_PURE_REF = re.compile(r"^\s*((?:'(?:[^']|'')+'|[A-Za-z_][\w.]*)!)?(\$?)([A-Z]{1,3})(\$?)([0-9]+)\s*$")
_RANGE = re.compile(r"^(?:('(?:[^']|'')+'|[^'!:]+)!)?(\$?)([A-Za-z]{1,3})(\$?)([0-9]+)"
                    r"(?::(\$?)([A-Za-z]{1,3})(\$?)([0-9]+))?$")
PRECEDENCE = {"=": 1, "<>": 1, "<": 1, ">": 1, "<=": 1, ">=": 1, "&": 2, "+": 3, "-": 3, "*": 4, "/": 4, "^": 5}
_ARRAY_OPS = {"+": "op_add", "-": "op_sub", "*": "op_mul", "/": "op_div", "^": "op_pow", "=": "op_eq",
              "<>": "op_ne", "<": "op_lt", "<=": "op_le", ">": "op_gt", ">=": "op_ge", "&": "op_cat"}
_ARITHMETIC = {"+": "ADD", "-": "SUB", "*": "MUL", "/": "DIV2", "^": "POW2"}
_COMPARE = {"=": "== 0", "<>": "!= 0", "<": "< 0", "<=": "<= 0", ">": "> 0", ">=": ">= 0"}


class NotReady(Exception):
    """A formula needs the value of another formula that is not computed yet."""

    def __init__(self, store: Store, key: int) -> None:
        super().__init__()
        self.store, self.key = store, key


class Unsupported(Exception):
    """A construct outside the fast path (handled by the general path)."""


@dataclass(eq=False)
class Store:
    """One sheet: formula cells (key -> evaluator) and values (constants, then computed formulas)."""

    name: str
    formulas: dict[int, object] = field(default_factory=dict)
    out: dict[int, object] = field(default_factory=dict)


def V(store: Store, row: int, col: int):
    """The value of one cell as a formula sees it (errors raised, uncomputed formulas NotReady).

    ``store.out`` holds the constants from the start and each formula's value once computed."""
    key = row * WIDTH + col
    value = store.out.get(key, _MISSING)
    if value is _MISSING:
        if key in store.formulas:
            raise NotReady(store, key)
        return None
    if type(value) is CellError:
        raise xf.XlErr(value.code)
    return value


def A(store: Store, r0: int, c0: int, r1: int, c1: int) -> xf.Arr:
    """A block of values (errors kept as elements)."""
    get = store.out.get
    if r0 == r1:
        base = r0 * WIDTH
        values = [get(base + col, _MISSING) for col in range(c0, c1 + 1)]
    else:
        values = [get(row * WIDTH + col, _MISSING) for row in range(r0, r1 + 1) for col in range(c0, c1 + 1)]
    if _MISSING in values:
        values = _fill(store, values, r0, c0, c1)
    return xf.Arr(r1 - r0 + 1, c1 - c0 + 1, values)


def _fill(store: Store, values: list, r0: int, c0: int, c1: int) -> list:
    """Empty cells read as None; a formula not computed yet is NotReady."""
    width = c1 - c0 + 1
    for n, value in enumerate(values):
        if value is _MISSING:
            key = (r0 + n // width) * WIDTH + c0 + n % width
            if key in store.formulas:
                raise NotReady(store, key)
            values[n] = None
    return values


def _raise(code: str):
    raise xf.XlErr(code)


RUNTIME = {name: getattr(xf, name) for name in dir(xf) if name.startswith(("op_", "f_"))}
RUNTIME.update(ADD=xf.add, SUB=xf.sub, MUL=xf.mul, DIV2=xf.divide, POW2=xf.raise_to,
               V=V, A=A, N=xf.num, T=xf.text, TRUTH=xf.truth, DIV=xf.div, POW=xf.power, CMP=xf.compare,
               EW=xf.elementwise, M=xf.mapped, RAISE=_raise, neg=lambda x: -xf.num(x))


# ---------------------------------------------------------------- parsing


@dataclass(frozen=True)
class Node:
    kind: str
    args: tuple = ()
    array: bool = False


class _Parser:
    """Precedence climbing over openpyxl's tokens; references resolved against the host cell."""

    def __init__(self, formula: str, resolve) -> None:
        try:
            items = Tokenizer("=" + formula).items
        except Exception as exc:
            raise Unsupported(f"cannot tokenize: {exc}") from None
        self.tokens = [t for t in items if t.type != Token.WSPACE]
        self.pos = 0
        self.resolve = resolve

    def peek(self) -> Token | None:
        return self.tokens[self.pos] if self.pos < len(self.tokens) else None

    def take(self) -> Token:
        token = self.peek()
        if token is None:
            raise Unsupported("unexpected end of formula")
        self.pos += 1
        return token

    def parse(self) -> Node:
        node = self.expression(1)
        if self.peek() is not None:
            raise Unsupported(f"unexpected token {self.peek().value!r}")
        return node

    def expression(self, minimum: int) -> Node:
        left = self.unary()
        while True:
            token = self.peek()
            if token is None or token.type != Token.OP_IN or token.value not in PRECEDENCE:
                return left
            prec = PRECEDENCE[token.value]
            if prec < minimum:
                return left
            self.take()
            right = self.expression(prec + 1)
            left = Node("bin", (token.value, left, right), left.array or right.array)

    def unary(self) -> Node:
        token = self.peek()
        if token is not None and token.type == Token.OP_PRE:
            self.take()
            operand = self.unary()
            return operand if token.value == "+" else Node("neg", (operand,), operand.array)
        node = self.primary()
        while (token := self.peek()) is not None and token.type == Token.OP_POST and token.value == "%":
            self.take()
            node = Node("pct", (node,), node.array)
        return node

    def primary(self) -> Node:
        token = self.take()
        if token.type == Token.OPERAND:
            return self.operand(token)
        if token.type == Token.PAREN and token.subtype == Token.OPEN:
            node = self.expression(1)
            closing = self.take()
            if closing.type != Token.PAREN:
                raise Unsupported("unbalanced parentheses")
            return node
        if token.type == Token.FUNC and token.subtype == Token.OPEN:
            return self.call(token.value[:-1].upper())
        raise Unsupported(f"unexpected token {token.value!r}")

    def call(self, name: str) -> Node:
        if name.startswith("_XLFN."):
            name = name[6:]
        args: list[Node] = []
        if (token := self.peek()) is not None and token.type == Token.FUNC and token.subtype == Token.CLOSE:
            self.take()
            return self.function(name, args)
        while True:
            args.append(self.expression(1))
            token = self.take()
            if token.type == Token.SEP and token.subtype == Token.ARG:
                continue
            if token.type == Token.FUNC and token.subtype == Token.CLOSE:
                return self.function(name, args)
            raise Unsupported(f"unexpected token {token.value!r} in {name}")

    @staticmethod
    def function(name: str, args: list[Node]) -> Node:
        if name not in xf.FAST_FUNCTIONS:
            raise Unsupported(f"function {name} is not on the fast path")
        if name in xf.ELEMENTWISE and len(args) == 1:
            return Node("call", (name, tuple(args)), args[0].array)
        if name == "IF" and (any(a.array for a in args) or not 2 <= len(args) <= 3):
            raise Unsupported("IF over arrays")
        return Node("call", (name, tuple(args)), False)

    def operand(self, token: Token) -> Node:
        if token.subtype == Token.NUMBER:
            return Node("num", (float(token.value),))
        if token.subtype == Token.TEXT:
            return Node("str", (token.value[1:-1].replace('""', '"'),))
        if token.subtype == Token.LOGICAL:
            return Node("bool", (token.value.upper() == "TRUE",))
        if token.subtype == Token.ERROR:
            return Node("err", (token.value,))
        return self.resolve(token.value)


# ---------------------------------------------------------------- code generation


class _Compiler:
    """Generates Python for one formula shape. A reference's row is read from ``R`` (the integers of
    the formula's own digit runs) at that reference's position, so one function serves every cell
    of the same shape whatever its rows."""

    def __init__(self, engine: Engine, host_sheet: str, formula: str) -> None:
        self.engine, self.host_sheet = engine, host_sheet
        self.stores: dict[str, str] = {}
        starts = {m.start(): n for n, m in enumerate(_RUNS.finditer(formula))}
        self.runs = _RUNS.findall(formula)
        self.row_runs = iter([starts[m.start(5)] for m in _KEY.finditer(formula) if m.group(5)])

    def store(self, sheet: str) -> str:
        name = self.engine.sheet_name(sheet)
        if name not in self.stores:
            self.stores[name] = f"S{len(self.stores)}"
        return self.stores[name]

    def resolve(self, text: str) -> Node:
        match = _RANGE.match(text)
        row = self.row
        if match is None:
            target = self.engine.names.get(text.upper())
            if target is None:
                raise Unsupported(f"unknown name or reference {text!r}")
            match = _RANGE.match(target.lstrip("="))
            if match is None:
                raise Unsupported(f"name {text!r} refers to {target!r}")
            row = _fixed_row  # a defined name's rows are in its definition, not in the formula
        sheet = match.group(1)
        sheet = self.host_sheet if sheet is None else sheet.strip("'").replace("''", "'")
        row0 = row(match.group(4), match.group(5))
        col0 = column_index(match.group(3).upper())
        if match.group(7) is None:
            return Node("ref", (sheet, row0, col0))
        row1 = row(match.group(8), match.group(9))
        col1 = column_index(match.group(7).upper())
        return Node("range", (sheet, row0, col0, row1, col1), True)

    def row(self, dollar: str, digits: str) -> str:
        index = next(self.row_runs, None)
        if index is None or self.runs[index] != digits:
            raise Unsupported("references not in the expected order")
        return f"(R[{index}]-1)"

    def code(self, node: Node) -> str:
        kind = node.kind
        if kind == "num":
            return repr(node.args[0])
        if kind in ("str", "bool"):
            return repr(node.args[0])
        if kind == "err":
            return f"RAISE({node.args[0]!r})"
        if kind == "ref":
            sheet, row, col = node.args
            return f"V({self.store(sheet)},{row},{col})"
        if kind == "range":
            sheet, r0, c0, r1, c1 = node.args
            return f"A({self.store(sheet)},{r0},{c0},{r1},{c1})"
        if kind == "neg":
            inner = self.code(node.args[0])
            return f"M(neg,{inner})" if node.array else f"(-N({inner}))"
        if kind == "pct":
            return f"(N({self.code(node.args[0])})/100.0)"
        if kind == "bin":
            return self.binary(node)
        return self.call(node)

    def binary(self, node: Node) -> str:
        op, left, right = node.args
        a, b = self.code(left), self.code(right)
        if node.array:
            return f"EW({_ARRAY_OPS[op]},{a},{b})"
        if op in _ARITHMETIC:
            return f"{_ARITHMETIC[op]}({a},{b})"
        if op == "&":
            return f"(T({a})+T({b}))"
        return f"(CMP({a},{b}){_COMPARE[op]})"

    def call(self, node: Node) -> str:
        name, args = node.args
        codes = [self.code(a) for a in args]
        if name == "IF":
            otherwise = codes[2] if len(codes) == 3 else "False"
            return f"(({codes[1]}) if TRUTH({codes[0]}) else ({otherwise}))"
        if name in xf.ARRAY_ARGUMENTS:  # a reference given to an aggregate is a range, even of one cell
            codes = [self.code(Node("range", (*a.args, a.args[1], a.args[2]), True)) if a.kind == "ref" else code
                     for a, code in zip(args, codes, strict=True)]
        function = f"f_{name.lower()}"
        if name in xf.ELEMENTWISE and node.array:
            return f"M({function},{codes[0]})"
        return f"{function}({','.join(codes)})"


# ---------------------------------------------------------------- the engine


@dataclass
class Recalculation:
    """Computed values of every formula cell, per sheet (0-based (row, col) keys)."""

    ordered: dict[str, list]  # per sheet, values in the order of the workbook's formula cells (compact to send)
    general: list[tuple[str, tuple[int, int], str]]
    templates: int
    formula_cells: int

    def values(self, book: Workbook) -> dict[str, dict[tuple[int, int], object]]:
        """Per sheet, (row, col) -> value."""
        return {name: dict(zip(book.sheets[name].formulas, values, strict=True))
                for name, values in self.ordered.items()}


class Engine:
    def __init__(self, book: Workbook) -> None:
        self.book = book
        self.names = {name.upper(): target for name, target in book.names.items()}
        self.stores = {name: Store(name) for name in book.sheets}
        self.by_upper = {name.upper(): name for name in book.sheets}
        self.templates: dict[tuple, object] = {}
        self.masks: dict[tuple[str, str], tuple[bool, ...]] = {}

    def sheet_name(self, name: str) -> str:
        found = self.by_upper.get(name.upper())
        if found is None:
            raise Unsupported(f"reference to a sheet that does not exist: {name!r}")
        return found

    def compile_template(self, sheet: str, formula: str):
        compiler = _Compiler(self, sheet, formula)
        node = _Parser(formula, compiler.resolve).parse()
        body = compiler.code(node)
        if node.array:
            body = f"_single({body})"
        namespace = dict(RUNTIME, _single=_single)
        namespace.update({alias: self.stores[name] for name, alias in compiler.stores.items()})
        exec(f"def _cell(r, R):\n    return {body}\n", namespace)
        return namespace["_cell"]

    def evaluator(self, sheet: str, row: int, formula: str):
        """(function, row numbers) that compute a cell: a shared compiled shape, a link, or the general path.

        Formulas that differ only in the row numbers of their references share one compiled
        function. The formula with every digit turned into 0 fixes the syntax; which digit runs are
        row numbers is found once per shape; the other runs (constants) are part of the key.
        """
        pure = None if "(" in formula else _PURE_REF.match(formula)
        if pure:
            link = self._link(sheet, row, pure)
            if link is not None:
                return link, ()
        runs = _RUNS.findall(formula)
        shape = formula.translate(_ZEROS)
        constants = self.masks.get((sheet, shape))
        if constants is None:
            indices = _constant_runs(formula)
            constants = self.masks[sheet, shape] = itemgetter(*indices) if indices else _nothing
        key = (sheet, shape, constants(runs))
        function = self.templates.get(key)
        if function is None:
            try:
                function = self.compile_template(sheet, formula)
            except (Unsupported, SyntaxError, RecursionError):
                try:
                    return _GeneralPath(self, sheet, formula), ()
                except (Unsupported, EvaluationError) as exc:
                    return _ErrorCell("#REF!" if "does not exist" in str(exc) else "#NAME?"), ()
            self.templates[key] = function
        return function, tuple(map(int, runs))

    def _link(self, sheet: str, row: int, match: re.Match):
        prefix = match.group(1)
        try:
            target = self.stores[self.sheet_name(prefix[:-1].strip("'").replace("''", "'"))] if prefix \
                else self.stores[sheet]
        except Unsupported:
            return None
        row_index, col = int(match.group(5)) - 1, column_index(match.group(3))
        return lambda _row, _runs, s=target, rr=row_index, c=col: V(s, rr, c)

    def run(self) -> Recalculation:
        order, general = self._load()
        for store, key in self._first_pass(order):
            if key not in store.out:
                self._compute(store, key)
        ordered = {name: [self.stores[name].out[r * WIDTH + c] for r, c in cells.formulas]
                   for name, cells in self.book.sheets.items()}
        return Recalculation(ordered=ordered, general=general, templates=len(self.templates),
                             formula_cells=len(order))

    def _load(self) -> tuple[list[tuple], list[tuple[str, tuple[int, int], str]]]:
        """Constants into each sheet's values, every formula compiled; the formula cells in file order
        and those on the general path."""
        order = []
        general = []
        for name, cells in self.book.sheets.items():
            store = self.stores[name]
            out, formulas = store.out, cells.formulas
            for (row, col), value in cells.values.items():
                if (row, col) not in formulas:
                    out[row * WIDTH + col] = value
            for (row, col), formula in formulas.items():  # file order: row by row
                key = row * WIDTH + col
                function, runs = self.evaluator(name, row, formula)
                store.formulas[key] = (function, runs, row)
                order.append((store, key, function, runs, row))
                if type(function) is _GeneralPath:
                    general.append((name, (row, col), formula))
        return order, general

    def each_on(self, given: dict[str, dict[tuple[int, int], object]], cells: list[tuple[str, int, int]]) -> list:
        """The value of each of ``cells`` computed from the ``given`` values of the formula cells it reads
        (formula cells not given are recalculated as usual): one formula at a time, so rounding cannot
        build up along a chain of them."""
        self._load()
        for name, values in given.items():
            store = self.stores.get(name)
            if store is not None:
                store.out.update((row * WIDTH + col, value) for (row, col), value in values.items())
        results = []
        for sheet, row, col in cells:
            store = self.stores[sheet]
            function, runs, host = store.formulas[row * WIDTH + col]
            while True:
                try:
                    results.append(_evaluate(function, host, runs))
                    break
                except NotReady as wait:
                    self._compute(wait.store, wait.key)
        return results

    @staticmethod
    def _first_pass(order: list[tuple]) -> list[tuple[Store, int]]:
        """Compute in sheet and row order; a cell whose inputs are not ready is put off, not chased."""
        deferred = []
        for store, key, function, runs, row in order:
            try:
                store.out[key] = _evaluate(function, row, runs)
            except NotReady:
                deferred.append((store, key))
        return deferred

    def _compute(self, store: Store, key: int) -> None:
        stack = [(store, key)]
        active = {(id(store), key)}
        while stack:
            s, k = stack[-1]
            if k in s.out:
                stack.pop()
                active.discard((id(s), k))
                continue
            function, runs, row = s.formulas[k]
            try:
                value = _evaluate(function, row, runs)
            except NotReady as wait:
                ident = (id(wait.store), wait.key)
                if ident in active:
                    s.out[k] = CellError("#CIRC!")
                    continue
                stack.append((wait.store, wait.key))
                active.add(ident)
                continue
            s.out[k] = value
            stack.pop()
            active.discard((id(s), k))


_ZEROS = str.maketrans("123456789", "000000000")
_RUNS = re.compile(r"[0-9]+")


def _constant_runs(formula: str) -> tuple[int, ...]:
    """Indices of the digit runs that are not row numbers of cell references (constants, names)."""
    rows = {m.start(5) for m in _KEY.finditer(formula) if m.group(5)}
    return tuple(n for n, m in enumerate(_RUNS.finditer(formula)) if m.start() not in rows)


def _nothing(_runs: list) -> tuple:
    return ()


def _fixed_row(_dollar: str, digits: str) -> str:
    return str(int(digits) - 1)


def _evaluate(function, row: int, runs: tuple):
    """One cell's value: errors become error values; NotReady passes through to the scheduler."""
    try:
        value = function(row, runs)
        return value if type(value) is float and value - value == 0.0 else _result(value)
    except xf.XlErr as err:
        return CellError(err.code)
    except (OverflowError, ValueError, ZeroDivisionError):
        return CellError("#NUM!")


def _single(value):
    if type(value) is xf.Arr:
        if value.rows * value.cols != 1:
            raise xf.XlErr("#VALUE!")
        return xf.raise_if_error(value.values[0])
    return value


def _result(value):
    if type(value) is float:
        if value - value != 0.0:
            raise xf.XlErr("#NUM!")
        return value
    if type(value) is int:
        return float(value)
    if type(value) is xf.Arr:
        return _single(value)
    return value


class _ErrorCell:
    """A formula no engine can evaluate here (e.g. a reference to a sheet that no longer exists)."""

    def __init__(self, code: str) -> None:
        self.code = code

    def __call__(self, _row: int, _runs: tuple = ()):
        raise xf.XlErr(self.code)


class _GeneralPath:
    """One cell evaluated by the `formulas` package (functions outside the fast path)."""

    def __init__(self, engine: Engine, sheet: str, formula: str) -> None:
        os.environ.setdefault("TQDM_DISABLE", "1")
        import formulas

        self.engine, self.sheet, self.formula = engine, sheet, formula
        try:
            self.function = formulas.Parser().ast("=" + _expand_names(formula, engine.names))[1].compile()
        except Exception as exc:
            raise EvaluationError(f"sheet {sheet!r}: cannot evaluate formula ={formula} ({exc})") from None
        self.inputs = [self._where(name) for name in self.function.inputs]

    def _where(self, text: str):
        match = _RANGE.match(text)
        if match is None:
            raise EvaluationError(f"sheet {self.sheet!r}: unsupported reference {text!r} in ={self.formula}")
        sheet = match.group(1)
        store = self.engine.stores[self.engine.sheet_name(sheet.strip("'").replace("''", "'"))] if sheet \
            else self.engine.stores[self.sheet]
        r0, c0 = int(match.group(5)) - 1, column_index(match.group(3).upper())
        if match.group(7) is None:
            return store, r0, c0, r0, c0
        return store, r0, c0, int(match.group(9)) - 1, column_index(match.group(7).upper())

    def __call__(self, _row: int, _runs: tuple = ()):
        import numpy as np
        from formulas.tokens.operand import XlError

        args = []
        for store, r0, c0, r1, c1 in self.inputs:
            block = A(store, r0, c0, r1, c1)
            values = [_to_formulas(v) for v in block.values]
            args.append(values[0] if len(values) == 1 else np.array(values, dtype=object).reshape(block.rows,
                                                                                                  block.cols))
        result = self.function(*args)
        value = result.ravel()[0] if hasattr(result, "ravel") else result
        if isinstance(value, XlError):
            raise xf.XlErr(str(value))
        if isinstance(value, np.bool_ | bool):
            return bool(value)
        if isinstance(value, np.generic):
            value = value.item()
        return float(value) if isinstance(value, int | float) else value


def _to_formulas(value):
    if type(value) is CellError:
        from formulas.tokens.operand import XlError

        return XlError(value.code)
    if value is None:
        import schedula  # the `formulas` package's own marker of an empty cell

        return schedula.EMPTY
    return value


def _expand_names(formula: str, names: dict[str, str]) -> str:
    if not names:
        return formula

    def swap(match: re.Match) -> str:
        target = names.get(match.group(0).upper())
        return target.lstrip("=") if target else match.group(0)

    return re.sub(r'"(?:[^"]|"")*"|\b[A-Za-z_][\w.]*\b(?!\s*[(!])', lambda m: m.group(0) if m.group(0)[0] == '"'
                  else swap(m), formula)


def recalculate(book: Workbook) -> Recalculation:
    """Compute every formula cell of ``book``."""
    return Engine(book).run()

