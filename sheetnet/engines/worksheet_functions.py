"""The spreadsheet functions sheetnet writes, for the embedded engine's fast path (values and
operators are in ``xlvalues``), following Excel's rules as the `formulas` package implements them.
Tests check every function here against that package on a wide sample of arguments, error values
included. The registries say which functions the compiler may call and how.
"""

from __future__ import annotations

import math
import re

from sheetnet.engines.xlvalues import Arr, XlErr, _rank, compare, finite, num, raise_if_error
from sheetnet.xlsx.cells import CellError


def f_exp(x) -> float:
    try:
        return finite(math.exp(num(x)))
    except OverflowError:
        raise XlErr("#NUM!") from None


def f_ln(x) -> float:
    x = num(x)
    if x <= 0:
        raise XlErr("#NUM!")
    return math.log(x)


def f_sqrt(x) -> float:
    x = num(x)
    if x < 0:
        raise XlErr("#NUM!")
    return math.sqrt(x)


def f_tanh(x) -> float:
    return math.tanh(num(x))


def f_abs(x) -> float:
    return abs(num(x))


SCALAR = {"EXP": f_exp, "LN": f_ln, "SQRT": f_sqrt, "TANH": f_tanh, "ABS": f_abs}


def _values(args) -> list:
    """Values of arguments for an aggregate: arrays flattened (errors raised), scalars coerced."""
    out = []
    for arg in args:
        if type(arg) is Arr:
            for v in arg.values:
                if type(v) is CellError:
                    raise XlErr(v.code)
                if type(v) is float:
                    out.append(v)
        else:
            out.append(num(arg))
    return out


def f_sum(*args) -> float:
    return finite(math.fsum(_values(args)))


def f_average(*args) -> float:
    values = _values(args)
    if not values:
        raise XlErr("#DIV/0!")
    return finite(math.fsum(values) / len(values))


def f_count(*args) -> float:
    count = 0
    for arg in args:
        if type(arg) is Arr:
            count += sum(1 for v in arg.values if type(v) is float)
        elif type(arg) is float:
            count += 1
    return float(count)


def f_max(*args) -> float:
    values = _values(args)
    return max(values) if values else 0.0


def f_min(*args) -> float:
    values = _values(args)
    return min(values) if values else 0.0


def _as_array(arg) -> Arr:
    return arg if type(arg) is Arr else Arr(1, 1, [arg])


def _first_error(arrays: list[Arr]) -> None:
    for array in arrays:
        for v in array.values:
            if type(v) is CellError:
                raise XlErr(v.code)


def f_sumproduct(*args) -> float:
    """Sum of element-wise products; non-numbers count as 0; shapes must agree (errors reported first)."""
    arrays = [_as_array(a) for a in args]
    _first_error(arrays)
    shape = (arrays[0].rows, arrays[0].cols)
    if any((a.rows, a.cols) != shape for a in arrays):
        raise XlErr("#VALUE!")
    total = []
    for items in zip(*(a.values for a in arrays), strict=True):
        product = 1.0
        for v in items:
            if type(v) is CellError:
                raise XlErr(v.code)
            product *= v if type(v) is float else 0.0
        total.append(product)
    return finite(math.fsum(total))


def f_sumxmy2(x, y) -> float:
    """Sum of (x - y)^2 over pairs where both are numbers."""
    a, b = _as_array(x), _as_array(y)
    _first_error([a, b])
    if len(a.values) != len(b.values):
        raise XlErr("#N/A")
    terms = [(u - v) ** 2 for u, v in zip(a.values, b.values, strict=True) if type(u) is float and type(v) is float]
    if not terms:
        raise XlErr("#DIV/0!")  # as the formulas package does when no pair is numeric
    return finite(math.fsum(terms))


_CRITERION = re.compile(r"^(<=|>=|<>|=|<|>)?(.*)$", re.S)


def _wildcard(pattern: str) -> re.Pattern:
    out, i = [], 0
    while i < len(pattern):
        ch = pattern[i]
        if ch == "~" and i + 1 < len(pattern):
            out.append(re.escape(pattern[i + 1]))
            i += 2
            continue
        out.append(".*" if ch == "*" else "." if ch == "?" else re.escape(ch))
        i += 1
    return re.compile("^" + "".join(out) + "$", re.S | re.I)


def criterion(crit):
    """A COUNTIFS/AVERAGEIFS criterion as a predicate on cell values."""
    if type(crit) is CellError:
        raise XlErr(crit.code)
    if type(crit) is not str:
        target = crit
        return lambda v: v is not None and type(v) is not str and compare(v, target) == 0
    op, operand = _CRITERION.match(crit).groups()
    try:
        number = float(operand)
    except ValueError:
        number = None
    if op in (None, "=") and number is None:
        if operand == "" and op == "=":
            return lambda v: v is None or v == ""
        pattern = _wildcard(operand)
        return lambda v: type(v) is str and pattern.match(v) is not None
    if op in (None, "="):
        return lambda v: (type(v) is float and v == number) or (type(v) is str and _num_or_none(v) == number)
    if op == "<>":
        if number is None:
            pattern = _wildcard(operand)
            return lambda v: (v is None or type(v) is str) and not pattern.match(v or "")
        return lambda v: not (type(v) is float and v == number)
    test = {"<": lambda c: c < 0, ">": lambda c: c > 0, "<=": lambda c: c <= 0, ">=": lambda c: c >= 0}[op]
    if number is None:
        return lambda v: type(v) is str and test(compare(v, operand))
    return lambda v: type(v) is float and test(compare(v, number))


def _num_or_none(text_value: str):
    try:
        return float(text_value)
    except ValueError:
        return None


def _matching(pairs) -> list[bool]:
    ranges = [_as_array(r) for r in pairs[0::2]]
    tests = [criterion(c) for c in pairs[1::2]]
    size = len(ranges[0].values)
    if any(len(r.values) != size for r in ranges):
        raise XlErr("#VALUE!")
    return [all(test(r.values[i]) for r, test in zip(ranges, tests, strict=True)) for i in range(size)]


def f_countifs(*pairs) -> float:
    return float(sum(_matching(pairs)))


def f_averageifs(values, *pairs) -> float:
    rows = _matching(pairs)
    data = _as_array(values)
    if len(data.values) != len(rows):
        raise XlErr("#VALUE!")
    picked = []
    for keep, v in zip(rows, data.values, strict=True):
        if keep:
            if type(v) is CellError:
                raise XlErr(v.code)
            if type(v) is float:
                picked.append(v)
    if not picked:
        raise XlErr("#DIV/0!")
    return finite(math.fsum(picked) / len(picked))


def f_match(value, lookup, kind=1.0) -> float:
    """MATCH with match type 0 (exact; text without case); other types are not on the fast path."""
    if num(kind) != 0:
        raise XlErr("#N/A")
    raise_if_error(value)
    for i, v in enumerate(_as_array(lookup).values):
        if type(v) is not CellError and v is not None and _rank(v) == _rank(value) and compare(v, value) == 0:
            return float(i + 1)
    raise XlErr("#N/A")


def f_index(array, row, col=None):
    data = _as_array(array)
    r = int(num(row))
    c = None if col is None else int(num(col))
    if data.rows == 1 and c is None:
        r, c = 1, r
    elif data.cols == 1 and c is None:
        c = 1
    if c is None or not (1 <= r <= data.rows) or not (1 <= c <= data.cols):
        raise XlErr("#REF!")
    return raise_if_error(data.values[(r - 1) * data.cols + (c - 1)])


AGGREGATE = {"SUM": f_sum, "AVERAGE": f_average, "COUNT": f_count, "MAX": f_max, "MIN": f_min,
             "SUMPRODUCT": f_sumproduct, "SUMXMY2": f_sumxmy2, "COUNTIFS": f_countifs,
             "AVERAGEIFS": f_averageifs, "MATCH": f_match, "INDEX": f_index}
#: Functions whose arguments may be arrays (ranges or array expressions).
ARRAY_ARGUMENTS = frozenset(AGGREGATE)
#: Functions that evaluate element-wise when given an array.
ELEMENTWISE = frozenset(SCALAR)
FAST_FUNCTIONS = frozenset(AGGREGATE) | frozenset(SCALAR) | {"IF"}
