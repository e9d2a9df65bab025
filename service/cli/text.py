"""Text for people: sizes, counts, numbers, aligned tables, the verdict line."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

# --- text for people ---------------------------------------------------------------

def _size(n: int) -> str:
    if n >= 1_000_000:
        return f"{n / 1_000_000:.1f} MB"
    return f"{n / 1000:.1f} kB" if n >= 1000 else f"{n} bytes"


def _count_of(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _num(x: Any) -> str:
    """A JSON number as a person writes it: 589 rather than 589.0."""
    if isinstance(x, float) and x.is_integer():
        return str(int(x))
    return str(x)


def _table(rows: Sequence[Sequence[str]], right: frozenset[int] = frozenset()) -> list[str]:
    """Rows padded to common column widths; columns in ``right`` are right-aligned."""
    if not rows:
        return []
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return ["  " + "  ".join(c.rjust(w) if i in right else c.ljust(w)
                             for i, (c, w) in enumerate(zip(r, widths, strict=True))).rstrip()
            for r in rows]


def _verdict_line(verdict: dict[str, Any]) -> str:
    checks = verdict.get("checks", [])
    failed = [str(c.get("name")) for c in checks if not c.get("passed")]
    if verdict.get("valid") is True:
        return f"certificate check: VALID ({len(checks) - len(failed)} checks passed)"
    return (f"certificate check: INVALID ({len(failed)} of {len(checks)} checks failed: "
            f"{', '.join(failed)})")
