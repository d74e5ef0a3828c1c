"""The embedded recalculation engine: every formula of a workbook, from the text as written.

It knows nothing about networks. Speed comes from three things:

* cells whose formulas are the same up to row offsets share one *template* (key: the formula
  with row numbers blanked, plus the row offsets), which is parsed and compiled to a Python
  function of the host row once;
* a template made only of operators and the functions in ``worksheet_functions.FAST_FUNCTIONS`` is compiled
  to straight Python over floats (the fast path); anything else is evaluated per cell by the
  `formulas` package (the general path) and reported as such;
* cells are computed in sheet and row order, and a cell that needs a formula not yet computed
  raises ``NotReady``; the scheduler computes that one first (an explicit stack, so chains of a
  million cells need no recursion).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from operator import itemgetter

from sheetnet.engines import xlvalues
from sheetnet.engines.cellstore import RUNTIME, WIDTH, NotReady, Store, V
from sheetnet.engines.compiler import REFERENCE, RUNS, FormulaCompiler, FormulaParser, Unsupported
from sheetnet.engines.general_path import GeneralPath
from sheetnet.errors import EvaluationError
from sheetnet.xlsx.addresses import column_index
from sheetnet.xlsx.cells import CellError, Workbook

_PURE_REF = re.compile(r"^\s*((?:'(?:[^']|'')+'|[A-Za-z_][\w.]*)!)?(\$?)([A-Z]{1,3})(\$?)([0-9]+)\s*$")




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
        compiler = FormulaCompiler(self, sheet, formula)
        node = FormulaParser(formula, compiler.resolve).parse()
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
        runs = RUNS.findall(formula)
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
                    return GeneralPath(self, sheet, formula), ()
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
                if type(function) is GeneralPath:
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


def _constant_runs(formula: str) -> tuple[int, ...]:
    """Indices of the digit runs that are not row numbers of cell references (constants, names)."""
    rows = {m.start(5) for m in REFERENCE.finditer(formula) if m.group(5)}
    return tuple(n for n, m in enumerate(RUNS.finditer(formula)) if m.start() not in rows)


def _nothing(_runs: list) -> tuple:
    return ()


def _evaluate(function, row: int, runs: tuple):
    """One cell's value: errors become error values; NotReady passes through to the scheduler."""
    try:
        value = function(row, runs)
        return value if type(value) is float and value - value == 0.0 else _result(value)
    except xlvalues.XlErr as err:
        return CellError(err.code)
    except (OverflowError, ValueError, ZeroDivisionError):
        return CellError("#NUM!")


def _single(value):
    if type(value) is xlvalues.Arr:
        if value.rows * value.cols != 1:
            raise xlvalues.XlErr("#VALUE!")
        return xlvalues.raise_if_error(value.values[0])
    return value


def _result(value):
    if type(value) is float:
        if value - value != 0.0:
            raise xlvalues.XlErr("#NUM!")
        return value
    if type(value) is int:
        return float(value)
    if type(value) is xlvalues.Arr:
        return _single(value)
    return value


class _ErrorCell:
    """A formula no engine can evaluate here (e.g. a reference to a sheet that no longer exists)."""

    def __init__(self, code: str) -> None:
        self.code = code

    def __call__(self, _row: int, _runs: tuple = ()):
        raise xlvalues.XlErr(self.code)


def recalculate(book: Workbook) -> Recalculation:
    """Compute every formula cell of ``book``."""
    return Engine(book).run()

