"""Formula text to Python: a precedence parser over openpyxl's tokens and a code generator that
turns a formula shape into one function of the host row (the embedded engine's fast path).

The generated code calls the runtime names of ``engines.embedded`` (V, A, ADD, CMP, ...); a
construct outside the fast path raises :class:`Unsupported` and the engine takes the general path."""

from __future__ import annotations

import re
from dataclasses import dataclass

from openpyxl.formula.tokenizer import Token, Tokenizer

from sheetnet.engines import worksheet_functions
from sheetnet.xlsx.addresses import column_index

#: Digit runs of a formula: row numbers of its references, and constants.
RUNS = re.compile(r"[0-9]+")
#: A quoted string (skipped) or a cell reference: sheet prefix, column, row anchor and row number.
REFERENCE = re.compile(r"""("(?:[^"]|"")*")|((?:'(?:[^']|'')+'|[A-Za-z_][\w.]*)!)?"""
                       r"""(\$?[A-Z]{1,3})(\$?)([0-9]+)(?![\w(!])""")
#: A reference or range, optionally with its sheet.
RANGE = re.compile(r"^(?:('(?:[^']|'')+'|[^'!:]+)!)?(\$?)([A-Za-z]{1,3})(\$?)([0-9]+)"
                    r"(?::(\$?)([A-Za-z]{1,3})(\$?)([0-9]+))?$")
PRECEDENCE = {"=": 1, "<>": 1, "<": 1, ">": 1, "<=": 1, ">=": 1, "&": 2, "+": 3, "-": 3, "*": 4, "/": 4, "^": 5}
_ARRAY_OPS = {"+": "op_add", "-": "op_sub", "*": "op_mul", "/": "op_div", "^": "op_pow", "=": "op_eq",
              "<>": "op_ne", "<": "op_lt", "<=": "op_le", ">": "op_gt", ">=": "op_ge", "&": "op_cat"}
_ARITHMETIC = {"+": "ADD", "-": "SUB", "*": "MUL", "/": "DIV", "^": "POW"}
_COMPARE = {"=": "== 0", "<>": "!= 0", "<": "< 0", "<=": "<= 0", ">": "> 0", ">=": ">= 0"}


class Unsupported(Exception):
    """A construct outside the fast path (handled by the general path)."""


@dataclass(frozen=True)
class Node:
    kind: str
    args: tuple = ()
    array: bool = False


class FormulaParser:
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
        if name not in worksheet_functions.FAST_FUNCTIONS:
            raise Unsupported(f"function {name} is not on the fast path")
        if name in worksheet_functions.ELEMENTWISE and len(args) == 1:
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


class FormulaCompiler:
    """Generates Python for one formula shape. A reference's row is read from ``R`` (the integers of
    the formula's own digit runs) at that reference's position, so one function serves every cell
    of the same shape whatever its rows."""

    def __init__(self, engine, host_sheet: str, formula: str) -> None:
        self.engine, self.host_sheet = engine, host_sheet
        self.stores: dict[str, str] = {}
        starts = {m.start(): n for n, m in enumerate(RUNS.finditer(formula))}
        self.runs = RUNS.findall(formula)
        self.row_runs = iter([starts[m.start(5)] for m in REFERENCE.finditer(formula) if m.group(5)])

    def store(self, sheet: str) -> str:
        name = self.engine.sheet_name(sheet)
        if name not in self.stores:
            self.stores[name] = f"S{len(self.stores)}"
        return self.stores[name]

    def resolve(self, text: str) -> Node:
        match = RANGE.match(text)
        row = self.row
        if match is None:
            target = self.engine.names.get(text.upper())
            if target is None:
                raise Unsupported(f"unknown name or reference {text!r}")
            match = RANGE.match(target.lstrip("="))
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
        if name in worksheet_functions.ARRAY_ARGUMENTS:  # a reference given to an aggregate is a range
            codes = [self.code(Node("range", (*a.args, a.args[1], a.args[2]), True)) if a.kind == "ref" else code
                     for a, code in zip(args, codes, strict=True)]
        function = f"f_{name.lower()}"
        if name in worksheet_functions.ELEMENTWISE and node.array:
            return f"M({function},{codes[0]})"
        return f"{function}({','.join(codes)})"


def _fixed_row(_dollar: str, digits: str) -> str:
    return str(int(digits) - 1)
