"""The general path: a cell whose formula the compiler cannot turn into straight Python is
evaluated by the `formulas` package, reading the same stores."""

from __future__ import annotations

import os
import re

import numpy as np

from sheetnet.engines import xlvalues
from sheetnet.engines.cellstore import A
from sheetnet.engines.compiler import RANGE
from sheetnet.errors import EvaluationError
from sheetnet.xlsx.addresses import column_index
from sheetnet.xlsx.cells import CellError


class GeneralPath:
    """One cell evaluated by the `formulas` package (functions outside the fast path)."""

    def __init__(self, engine, sheet: str, formula: str) -> None:
        os.environ.setdefault("TQDM_DISABLE", "1")
        import formulas  # lazy: the formulas package costs seconds to import and only this engine or path needs it

        self.engine, self.sheet, self.formula = engine, sheet, formula
        try:
            self.function = formulas.Parser().ast("=" + _expand_names(formula, engine.names))[1].compile()
        except Exception as exc:
            raise EvaluationError(f"sheet {sheet!r}: cannot evaluate formula ={formula} ({exc})") from None
        self.inputs = [self._where(name) for name in self.function.inputs]

    def _where(self, text: str):
        match = RANGE.match(text)
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
        # lazy: the formulas package costs seconds to import and only this engine or path needs it
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
            raise xlvalues.XlErr(str(value))
        if isinstance(value, np.bool_ | bool):
            return bool(value)
        if isinstance(value, np.generic):
            value = value.item()
        return float(value) if isinstance(value, int | float) else value


def _to_formulas(value):
    if type(value) is CellError:
        # lazy: the formulas package costs seconds to import and only this engine or path needs it
        from formulas.tokens.operand import XlError

        return XlError(value.code)
    if value is None:
        import schedula  # lazy: loaded with the `formulas` package; its own marker of an empty cell

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
