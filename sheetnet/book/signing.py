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
import json
import os
import secrets
import stat
from dataclasses import dataclass
from pathlib import Path

from sheetnet.book.canonical import constant_text, normalize_formula, target_text
from sheetnet.book.layout import LAYOUT
from sheetnet.book.xlsxread import Workbook
from sheetnet.errors import UsageError

ALGORITHM = "HMAC-SHA256"
KEY_BYTES = 32
_CONTEXT = b"sheetnet workbook signature v1\n"


def new_key_text() -> str:
    """A fresh random key as 64 hexadecimal digits (256 bits)."""
    return secrets.token_hex(KEY_BYTES) + "\n"


def read_key(path: Path) -> bytes:
    """The key in a key file: 64 or more hexadecimal digits, or at least 32 raw bytes."""
    try:
        raw = Path(path).read_bytes()
    except FileNotFoundError:
        raise UsageError(f"{path}: key file not found") from None
    except OSError as exc:
        raise UsageError(f"{path}: cannot read the key file ({exc.strerror})") from None
    text = raw.strip()
    try:
        key = bytes.fromhex(text.decode("ascii")) if len(text) >= 2 * KEY_BYTES else None
    except (UnicodeDecodeError, ValueError):
        key = None
    key = key if key is not None else raw
    if len(key) < KEY_BYTES:
        raise UsageError(f"{path}: a key needs at least {KEY_BYTES} bytes (64 hexadecimal digits); make one with "
                         "'sheetnet new-key'")
    return key


def key_readable_by_others(path: Path) -> bool:
    """True when the key file's permissions let other users read it (POSIX only)."""
    return os.name == "posix" and bool(Path(path).stat().st_mode & (stat.S_IRGRP | stat.S_IROTH))


def key_id(key: bytes) -> str:
    """A short public name for a key (tells which key signed, and reveals nothing usable)."""
    return hashlib.sha256(b"sheetnet key id\n" + key).hexdigest()[:16]


def canonical_json(data: dict) -> str:
    """The description as signed: compact, keys sorted, without its signature."""
    return json.dumps({k: v for k, v in data.items() if k != "signature"}, separators=(",", ":"), sort_keys=True)


def mac(data: dict, key: bytes) -> str:
    return hmac.new(key, _CONTEXT + canonical_json(data).encode("utf-8"), hashlib.sha256).hexdigest()


def signature(data: dict, key: bytes) -> dict:
    return {"algorithm": ALGORITHM, "key_id": key_id(key), "mac": mac(data, key)}


class CellDigests:
    """Running digests of every cell, one per sheet, fed in row and column order."""

    def __init__(self) -> None:
        self._sheets: dict[str, hashlib._Hash] = {}

    def add(self, sheet: str, row: int, col: int, formula: str | None, value: object) -> None:
        """One cell: its formula text (without or with '='), else its constant."""
        text = "f:" + normalize_formula(formula) if formula is not None else constant_text(value)
        if text is not None:
            self._sheets.setdefault(sheet, hashlib.sha256()).update(f"{row},{col},{text}\n".encode())

    def to_dict(self) -> dict[str, str]:
        return {sheet: digest.hexdigest() for sheet, digest in sorted(self._sheets.items())}


def names_digest(names: dict[str, str]) -> str:
    """Defined names and their targets (``name -> refers-to text``), in name order."""
    lines = "".join(f"{name}={target_text(target)}\n" for name, target in sorted(names.items()))
    return hashlib.sha256(lines.encode()).hexdigest()


def file_digests(book: Workbook, sheets: list[str]) -> tuple[dict[str, str], str]:
    """The cell digests of ``sheets`` and the names digest of the workbook as it is now."""
    digests = CellDigests()
    for name in sheets:
        cells = book.sheets.get(name)
        if cells is None:
            continue
        for row, col in sorted(cells.values):
            digests.add(name, row, col, cells.formulas.get((row, col)), cells.values[row, col])
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
    if not isinstance(stored, dict):
        return SignatureCheck("missing", "the workbook carries no signature (it was built without --sign-key, "
                                         "or the signature was removed)", mine)
    if stored.get("key_id") != mine:
        return SignatureCheck("wrong-key", f"the signature was made with key id {stored.get('key_id')!s:.16}, not "
                                           f"with the key given (key id {mine}); with the wrong key nothing can be "
                                           "said", mine)
    if not hmac.compare_digest(str(stored.get("mac", "")), mac(data, key)):
        return SignatureCheck("broken", "the layout description was changed after signing", mine)
    prints = data.get("fingerprints", {})  # covered by the signature, so as built
    cells, names = file_digests(book, [sheet for sheet in data.get("sheets", []) if sheet != LAYOUT])
    changed = sorted(set(cells) | set(prints.get("cells", {})), key=str)
    changed = [s for s in changed if cells.get(s) != prints.get("cells", {}).get(s)]
    what = []
    if changed:
        what.append(f"cells changed after signing on sheet(s) {', '.join(changed)}")
    if names != prints.get("names"):
        what.append("defined names changed after signing")
    if what:
        return SignatureCheck("broken", "; ".join(what), mine)
    return SignatureCheck("valid", "the layout description, every cell and every defined name are as signed", mine)
