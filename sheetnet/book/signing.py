"""Tamper evidence with a secret key: an HMAC-SHA256 over the layout description, which itself
holds a digest of every cell (formula text and constants) and every defined name.

Why HMAC-SHA256 rather than a public-key signature: it needs nothing outside Python's standard
library, and the people who sign (whoever builds the workbook for a validation team) and those
who check (that team) share one organisation, which can hold one secret. The trade-off: whoever
can check a signature could also make one, so the key must stay with the team that owns it.

Cell digests use the canonical forms of ``canonical`` (formula text without spaces or case,
numbers to 15 significant digits), so opening and saving an untouched workbook in a spreadsheet
application does not break a signature, while any edit of a value, formula, label or name does.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import secrets
import stat
from dataclasses import dataclass
from pathlib import Path

from sheetnet.book.canonical import constant_text, normalize_formula, same_value, target_text
from sheetnet.book.describe import SIGNATURE_ALGORITHM as ALGORITHM
from sheetnet.book.describe import description_text
from sheetnet.book.layout import LAYOUT, BookLayout, build_layout
from sheetnet.book.read import input_cells
from sheetnet.book.schema import read_original_inputs, read_spec
from sheetnet.book.untrusted import layout_sheet_problems
from sheetnet.errors import UsageError
from sheetnet.xlsx.addresses import defined_name_target
from sheetnet.xlsx.cells import Workbook

KEY_BYTES = 32
_CONTEXT = b"sheetnet workbook signature v1\n"


def new_key_text() -> str:
    """A fresh random key as 64 hexadecimal digits (256 bits)."""
    return secrets.token_hex(KEY_BYTES) + "\n"


#: A key file is small: anything larger is not a key (and is not read whole).
MAX_KEY_FILE_BYTES = 1024


def read_key(path: Path) -> bytes:
    """The key in a key file: 64 to 1,024 hexadecimal digits (what ``sheetnet new-key`` writes), or 32 to
    1,024 raw bytes that look random (at least 16 different byte values)."""
    try:
        with Path(path).open("rb") as handle:
            raw = handle.read(MAX_KEY_FILE_BYTES + 1)
    except FileNotFoundError:
        raise UsageError(f"{path}: key file not found") from None
    except OSError as exc:
        raise UsageError(f"{path}: cannot read the key file ({exc.strerror or exc})") from None
    if len(raw) > MAX_KEY_FILE_BYTES:
        raise UsageError(f"{path}: not a key file (over {MAX_KEY_FILE_BYTES:,} bytes); make one with "
                         "'sheetnet new-key'")
    text = raw.strip()
    try:
        key = bytes.fromhex(text.decode("ascii")) if len(text) >= 2 * KEY_BYTES else None
    except (UnicodeDecodeError, ValueError):
        key = None
    key = key if key is not None else raw
    if len(key) < KEY_BYTES or len(set(key)) < 16:
        raise UsageError(f"{path}: a key needs at least {KEY_BYTES} random bytes (64 hexadecimal digits); make one "
                         "with 'sheetnet new-key'")
    return key


def key_readable_by_others(path: Path) -> bool:
    """True when the key file's permissions let other users read it (POSIX only)."""
    return os.name == "posix" and bool(Path(path).stat().st_mode & (stat.S_IRGRP | stat.S_IROTH))


def key_id(key: bytes) -> str:
    """A short public name for a key (tells which key signed, and reveals nothing usable)."""
    return hashlib.sha256(b"sheetnet key id\n" + key).hexdigest()[:16]


def canonical_json(data: dict) -> str:
    """The description as signed: compact, keys sorted, without its signature."""
    return description_text({k: v for k, v in data.items() if k != "signature"})


def mac(data: dict, key: bytes) -> str:
    return hmac.new(key, _CONTEXT + canonical_json(data).encode("utf-8"), hashlib.sha256).hexdigest()


def sign(data: dict, layout: BookLayout, cells: CellDigests, key: bytes) -> None:
    """Add the digests of every cell written and of the defined names, then the signature over all."""
    data["fingerprints"]["cells"] = cells.to_dict()
    data["fingerprints"]["names"] = names_digest({name: defined_name_target(block)
                                                 for name, block in layout.defined_names().items()})
    data["signature"] = {"algorithm": ALGORITHM, "key_id": key_id(key), "mac": mac(data, key)}


class CellDigests:
    """Running digests of every cell, one per sheet, fed in row and column order."""

    def __init__(self) -> None:
        self._sheets: dict[str, hashlib._Hash] = {}

    def add(self, sheet: str, row: int, col: int, formula: str | None, value: object, is_input: bool = False) -> None:
        """One cell: its formula text (without or with '='), else its constant. An input cell's number
        counts only by its place: the signed description holds its value, which the check compares
        within the round-trip tolerance (applications round numbers in their own ways: no digit count
        survives every one of them)."""
        if formula is not None:
            text = "f:" + normalize_formula(formula)
        else:
            text = "i" if is_input and value not in (None, "") else constant_text(value)
        if text is not None:
            self._sheets.setdefault(sheet, hashlib.sha256()).update(f"{row},{col},{text}\n".encode())

    def to_dict(self) -> dict[str, str]:
        return {sheet: digest.hexdigest() for sheet, digest in sorted(self._sheets.items())}


def names_digest(names: dict[str, str]) -> str:
    """Defined names and their targets (``name -> refers-to text``), in name order."""
    lines = "".join(f"{name}={target_text(target)}\n" for name, target in sorted(names.items()))
    return hashlib.sha256(lines.encode()).hexdigest()


def file_digests(book: Workbook, sheets: list[str], inputs: set) -> tuple[dict[str, str], str]:
    """The cell digests of ``sheets`` and the names digest of the workbook as it is now; ``inputs``
    holds the (sheet, (row, col)) of the input cells."""
    digests = CellDigests()
    for name in sheets:
        cells = book.sheets.get(name)
        if cells is None:
            continue
        for row, col in sorted(cells.values):
            digests.add(name, row, col, cells.formulas.get((row, col)), cells.values[row, col],
                        (name, (row, col)) in inputs)
    names = {name: target for name, target in book.names.items() if not name.startswith("_xlnm")}
    return digests.to_dict(), names_digest(names)


@dataclass(frozen=True)
class SignatureCheck:
    """``status``: valid, broken, missing (the file was not signed) or wrong-key (signed with another)."""

    status: str
    detail: str
    key_id: str

    @property
    def holds(self) -> bool:
        return self.status == "valid"

    def to_dict(self) -> dict:
        return {"status": self.status, "detail": self.detail, "key_id": self.key_id}


def check_signature(book: Workbook, data: dict | None, key: bytes) -> SignatureCheck:
    """Whether the description and every cell are as they were signed with ``key``."""
    mine = key_id(key)
    stored = None if data is None else data.get("signature")
    if data is None:
        return SignatureCheck("broken", "the layout description cannot be read, so nothing it signed can be "
                                        "trusted", mine)
    if stored is None:
        return SignatureCheck("missing", "the workbook carries no signature (it was built without --sign-key, "
                                         "or the signature was removed)", mine)
    if not isinstance(stored, dict) or set(stored) != {"algorithm", "key_id", "mac"} or \
            stored["algorithm"] != ALGORITHM:
        return SignatureCheck("broken", f"the signature block was altered (a {ALGORITHM} signature has exactly "
                                        "'algorithm', 'key_id' and 'mac')", mine)
    if stored["key_id"] != mine:
        return SignatureCheck("wrong-key", f"the signature was made with key id {stored['key_id']!s:.16}, not "
                                           f"with the key given (key id {mine}); with the wrong key nothing can be "
                                           "said", mine)
    if not hmac.compare_digest(str(stored["mac"]), mac(data, key)):
        return SignatureCheck("broken", "the layout description was changed after signing", mine)
    what = _changed_since_signing(book, data)
    if what:
        return SignatureCheck("broken", "; ".join(what), mine)
    return SignatureCheck("valid", "the layout description, every cell and every defined name are as signed", mine)


def _changed_since_signing(book: Workbook, data: dict) -> list[str]:
    """What differs from the signed description (authentic once the MAC holds): cells (formulas and
    texts by digest, input numbers against the signed values) and defined names."""
    spec, _ = read_spec(data["spec"])
    original = None if spec is None else read_original_inputs(data["inputs"], spec)[0]
    if original is None:  # cannot happen for a description sheetnet signed
        return ["the signed description cannot be read"]
    layout = build_layout(spec)
    inputs = {(sheet, pos): value for sheet, pos, value, _ in input_cells(layout, original)}
    prints = data.get("fingerprints", {})
    cells, names = file_digests(book, [sheet for sheet in data.get("sheets", []) if sheet != LAYOUT], set(inputs))
    changed = {s for s in set(cells) | set(prints.get("cells", {})) if cells.get(s) != prints.get("cells", {}).get(s)}
    for (sheet, (row, col)), value in inputs.items():
        found = book.sheets[sheet].values.get((row, col)) if sheet in book.sheets else None
        if not same_value(found, value):
            changed.add(sheet)
    what = [f"cells changed after signing on sheet(s) {', '.join(sorted(changed))}"] if changed else []
    if names != prints.get("names"):
        what.append("defined names changed after signing")
    added = [sheet for sheet in book.sheets if sheet not in data.get("sheets", [])]
    if added:
        what.append(f"sheet(s) added after signing: {', '.join(added)}")
    if LAYOUT in book.sheets and layout_sheet_problems(book, LAYOUT):
        what.append("the layout sheet holds more than the signed description, or was changed")
    return what
