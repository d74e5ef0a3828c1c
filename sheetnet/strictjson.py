"""JSON read strictly: an object that names a key twice is refused, because readers disagree on which
value wins (Python keeps the last, others the first), so a file could mean two things."""

from __future__ import annotations


class RepeatedKey(Exception):
    """A JSON object names one key twice (first-wins and last-wins readers would see different data)."""


def without_repeated_keys(pairs: list[tuple[str, object]]) -> dict:
    out = dict(pairs)
    if len(out) != len(pairs):
        seen: set[str] = set()
        raise RepeatedKey(next(key for key, _ in pairs if key in seen or seen.add(key)))
    return out
