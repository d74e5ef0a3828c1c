"""Spreadsheet values for the embedded engine's fast path: errors (the exception :class:`XlErr`, so
the error-free path costs nothing), ranges (:class:`Arr`, row-major values), coercions, comparison
and the operators, element-wise on ranges, following Excel's rules as the `formulas` package
implements them (tests check them against that package, error values included)."""

from __future__ import annotations

from typing import NamedTuple

from sheetnet.xlsx.cells import CellError


class XlErr(Exception):
    """A spreadsheet error raised while computing a cell."""

    def __init__(self, code: str) -> None:
        super().__init__(code)
        self.code = code


class Arr(NamedTuple):
    """A rectangular block of values, row-major; elements may be CellError values (a tuple: cheap)."""

    rows: int
    cols: int
    values: list


def raise_if_error(value):
    if type(value) is CellError:
        raise XlErr(value.code)
    return value


def num(value) -> float:
    """A value in arithmetic: numbers as they are, empty = 0, TRUE = 1, numeric text parsed."""
    t = type(value)
    if t is float:
        return value
    if value is None:
        return 0.0
    if t is bool or t is int:
        return float(value)
    if t is str:
        try:
            return float(value)
        except ValueError:
            raise XlErr("#VALUE!") from None
    if t is CellError:
        raise XlErr(value.code)
    if t is Arr:
        raise XlErr("#VALUE!")
    raise XlErr("#VALUE!")


def text(value) -> str:
    """A value in text context (the & operator)."""
    if value is None:
        return ""
    if type(value) is bool:
        return "TRUE" if value else "FALSE"
    if type(value) is float:
        return repr(int(value)) if value == int(value) and abs(value) < 1e15 else repr(value)
    if type(value) is CellError:
        raise XlErr(value.code)
    return str(value)


def truth(value) -> bool:
    """A condition: nonzero numbers and TRUE are true; text is an error."""
    if type(value) is bool:
        return value
    if value is None:
        return False
    if type(value) is str:
        upper = value.upper()
        if upper in ("TRUE", "FALSE"):
            return upper == "TRUE"
        raise XlErr("#VALUE!")
    return num(value) != 0


def finite(value: float) -> float:
    """Overflow to infinity (or NaN) is #NUM! in a spreadsheet."""
    if value - value != 0.0:
        raise XlErr("#NUM!")
    return value


def quotient(a: float, b: float) -> float:
    """a/b of two numbers; /0 is #DIV/0!."""
    if b == 0:
        raise XlErr("#DIV/0!")
    return finite(a / b)


def power(a: float, b: float) -> float:
    """a^b; 0^0 is 1 and 0^-x is #NUM!, as LibreOffice computes them."""
    if a == 0 and b < 0:
        raise XlErr("#NUM!")
    try:
        result = a**b
    except OverflowError:
        raise XlErr("#NUM!") from None
    if isinstance(result, complex):
        raise XlErr("#NUM!")
    return finite(result)


def _rank(value) -> int:
    """Excel's ordering of kinds: numbers < text < logical values."""
    t = type(value)
    return 2 if t is bool else 1 if t is str else 0


def compare(a, b) -> int:
    """-1, 0 or 1, with Excel's rules (empty is 0 or "", text compares without case)."""
    raise_if_error(a)
    raise_if_error(b)
    if a is None:
        a = "" if type(b) is str else False if type(b) is bool else 0.0
    if b is None:
        b = "" if type(a) is str else False if type(a) is bool else 0.0
    ra, rb = _rank(a), _rank(b)
    if ra != rb:
        return -1 if ra < rb else 1
    if ra == 1:
        a, b = a.casefold(), b.casefold()
    return (a > b) - (a < b)


def eq(a, b) -> bool:
    return compare(a, b) == 0


def _broadcast(a, b) -> tuple[int, int, list, list]:
    if type(a) is Arr and type(b) is Arr:
        if (a.rows, a.cols) == (b.rows, b.cols):
            return a.rows, a.cols, a.values, b.values
        if a.rows * a.cols == 1:
            return b.rows, b.cols, a.values * len(b.values), b.values
        if b.rows * b.cols == 1:
            return a.rows, a.cols, a.values, b.values * len(a.values)
        raise XlErr("#VALUE!")
    if type(a) is Arr:
        return a.rows, a.cols, a.values, [b] * len(a.values)
    return b.rows, b.cols, [a] * len(b.values), b.values


def _safe(op, x, y):
    try:
        return op(x, y)
    except XlErr as err:
        return CellError(err.code)


def elementwise(op, a, b) -> Arr:
    """``op`` applied element by element (scalars broadcast); errors stay in their elements."""
    rows, cols, xs, ys = _broadcast(a, b)
    return Arr(rows, cols, [_safe(op, x, y) for x, y in zip(xs, ys, strict=True)])


def mapped(op, a) -> Arr:
    return Arr(a.rows, a.cols, [_safe(lambda x, _: op(x), x, None) for x in a.values])


# Scalar operators: both operands are evaluated before either is coerced, so an error in either
# operand wins (references raise their errors when read); overflow to infinity is #NUM!.


def add(x, y) -> float:
    v = num(x) + num(y)
    if v - v != 0.0:
        raise XlErr("#NUM!")
    return v


def sub(x, y) -> float:
    v = num(x) - num(y)
    if v - v != 0.0:
        raise XlErr("#NUM!")
    return v


def mul(x, y) -> float:
    v = num(x) * num(y)
    if v - v != 0.0:
        raise XlErr("#NUM!")
    return v


def div(x, y) -> float:
    return quotient(num(x), num(y))


def pow_(x, y) -> float:
    return power(num(x), num(y))


def errors_first(x, y) -> None:
    """An error in either operand wins over a type problem in the other (as the formulas package does)."""
    if type(x) is CellError:
        raise XlErr(x.code)
    if type(y) is CellError:
        raise XlErr(y.code)


def op_add(x, y):
    errors_first(x, y)
    return finite(num(x) + num(y))


def op_sub(x, y):
    errors_first(x, y)
    return finite(num(x) - num(y))


def op_mul(x, y):
    errors_first(x, y)
    return finite(num(x) * num(y))


def op_div(x, y):
    errors_first(x, y)
    return quotient(num(x), num(y))


def op_pow(x, y):
    errors_first(x, y)
    return power(num(x), num(y))


def op_eq(x, y):
    return compare(x, y) == 0


def op_ne(x, y):
    return compare(x, y) != 0


def op_lt(x, y):
    return compare(x, y) < 0


def op_le(x, y):
    return compare(x, y) <= 0


def op_gt(x, y):
    return compare(x, y) > 0


def op_ge(x, y):
    return compare(x, y) >= 0


def op_cat(x, y):
    return text(x) + text(y)
