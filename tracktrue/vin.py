"""VIN check digit (ISO 3779; 49 CFR 565.15, the US rule that fixes position 9).

Shared because the simulator issues VINs and ingest verifies them.
"""

from __future__ import annotations

#: 49 CFR 565.15(c): letter transliteration (I, O, Q are not allowed).
_VALUES = {
    **{str(d): d for d in range(10)},
    **dict(zip("ABCDEFGH", range(1, 9))),
    **dict(zip("JKLMN", range(1, 6))),
    "P": 7,
    "R": 9,
    **dict(zip("STUVWXYZ", range(2, 10))),
}
#: 49 CFR 565.15(c): position weights 1..17.
_WEIGHTS = (8, 7, 6, 5, 4, 3, 2, 10, 0, 9, 8, 7, 6, 5, 4, 3, 2)


def vin_problem(vin: str) -> str | None:
    """Why a VIN is not valid, or None when it is (length, characters, check digit)."""
    text = vin.strip().upper()
    if len(text) != 17:
        return f"VIN {vin!r} has {len(text)} characters, not 17"
    bad = sorted({c for c in text if c not in _VALUES})
    if bad:
        return f"VIN {vin!r} contains characters not allowed in a VIN: {''.join(bad)}"
    expected = check_digit(text)
    if text[8] != expected:
        return f"VIN {vin!r} fails its check digit (position 9 is {text[8]!r}, expected {expected!r})"
    return None


def check_digit(vin: str) -> str:
    """The check digit position 9 must hold: weighted sum mod 11, 10 written as X."""
    total = sum(_VALUES[c] * w for c, w in zip(vin.upper(), _WEIGHTS))
    rem = total % 11
    return "X" if rem == 10 else str(rem)


def with_check_digit(vin16_or_17: str) -> str:
    """Put the right check digit at position 9 of a 17-character VIN draft."""
    text = vin16_or_17.upper()
    if len(text) != 17:
        raise ValueError("a VIN draft must have 17 characters (position 9 is overwritten)")
    return text[:8] + check_digit(text) + text[9:]
