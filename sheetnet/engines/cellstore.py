"""The values a compiled formula reads: one store per sheet (constants, then computed formulas),
read through V (one cell) and A (a block), and the runtime names generated code calls.

A formula that needs a formula cell not computed yet raises :class:`NotReady`; the engine's
scheduler computes that cell first."""

from __future__ import annotations

from dataclasses import dataclass, field

from sheetnet.engines import worksheet_functions, xlvalues
from sheetnet.xlsx.cells import CellError

WIDTH = 16_384  # cell key = row * WIDTH + col
MISSING = object()


class NotReady(Exception):
    """A formula needs the value of another formula that is not computed yet."""

    def __init__(self, store: Store, key: int) -> None:
        super().__init__()
        self.store, self.key = store, key


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
    value = store.out.get(key, MISSING)
    if value is MISSING:
        if key in store.formulas:
            raise NotReady(store, key)
        return None
    if type(value) is CellError:
        raise xlvalues.XlErr(value.code)
    return value


def A(store: Store, r0: int, c0: int, r1: int, c1: int) -> xlvalues.Arr:
    """A block of values (errors kept as elements)."""
    get = store.out.get
    if r0 == r1:
        base = r0 * WIDTH
        values = [get(base + col, MISSING) for col in range(c0, c1 + 1)]
    else:
        values = [get(row * WIDTH + col, MISSING) for row in range(r0, r1 + 1) for col in range(c0, c1 + 1)]
    if MISSING in values:
        values = _fill(store, values, r0, c0, c1)
    return xlvalues.Arr(r1 - r0 + 1, c1 - c0 + 1, values)


def _fill(store: Store, values: list, r0: int, c0: int, c1: int) -> list:
    """Empty cells read as None; a formula not computed yet is NotReady."""
    width = c1 - c0 + 1
    for n, value in enumerate(values):
        if value is MISSING:
            key = (r0 + n // width) * WIDTH + c0 + n % width
            if key in store.formulas:
                raise NotReady(store, key)
            values[n] = None
    return values


def raise_error(code: str):
    raise xlvalues.XlErr(code)


RUNTIME = {name: getattr(module, name) for module in (worksheet_functions, xlvalues) for name in dir(module)
           if name.startswith(("op_", "f_"))}
RUNTIME.update(ADD=xlvalues.add, SUB=xlvalues.sub, MUL=xlvalues.mul, DIV=xlvalues.div, POW=xlvalues.pow_,
               V=V, A=A, N=xlvalues.num, T=xlvalues.text, TRUTH=xlvalues.truth, CMP=xlvalues.compare,
               EW=xlvalues.elementwise, M=xlvalues.mapped, RAISE=raise_error, neg=lambda x: -xlvalues.num(x))


