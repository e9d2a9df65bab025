"""The named checks of a verdict, in the order they were made."""

from __future__ import annotations

from typing import Any


class _Checks:
    def __init__(self) -> None:
        self.items: list[dict[str, Any]] = []

    def add(self, name: str, bad: str | None, ok_detail: str) -> bool:
        self.items.append({"name": name, "passed": bad is None,
                           "detail": ok_detail if bad is None else bad})
        return bad is None

    def skip(self, names: list[str], why: str) -> None:
        for name in names:
            self.add(name, f"not checked: {why}", "")


def _result(checks: _Checks) -> dict[str, Any]:
    return {"valid": all(c["passed"] for c in checks.items), "checks": checks.items}
