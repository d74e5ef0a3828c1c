"""When a recalculated value agrees with the reference: the one rule every check applies."""

from __future__ import annotations

#: Relative to the value (absolute below 1): far above the rounding of one formula chain, far below
#: any edit a person makes.
DEFAULT_TOLERANCE = 1e-9


def agree(found, expected, tolerance: float) -> bool:
    """Numbers within the tolerance (a number never agrees with text or a truth value); anything else
    by its text, an empty cell agreeing with an empty expectation."""
    if isinstance(expected, float | int) and not isinstance(expected, bool):
        if isinstance(found, bool) or not isinstance(found, float | int):
            return False
        return abs(found - expected) <= tolerance * max(1.0, abs(expected))
    if expected is None or expected == "":
        return found is None or found == ""
    return str(found) == str(expected)
