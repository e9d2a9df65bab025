"""Small fields of the wire format: one number, a list of ids, a map of numbers, a boolean."""

from __future__ import annotations

from typing import Any

import numpy as np
from marshmallow import ValidationError, fields

from schemas.numbers import (
    MAX_ABS_VALUE,
    MAX_ANSWER_VALUE,
    _bad_number,
    _cap,
    check_ids,
    check_numbers,
    number_detail,
)


class Number(fields.Field):
    """One finite JSON number (no strings, no booleans) within the documented bound."""

    def __init__(self, *, kind: str = "number", bound: int = MAX_ABS_VALUE,
                 **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.kind = kind
        self.bound = bound

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        if _bad_number(value, self.kind, self.bound):
            raise ValidationError(number_detail(self.kind, self.bound))
        return int(value) if self.kind == "count" else value


class IdList(fields.Field):
    """A list of ids (non-empty strings)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> list[str]:
        if not isinstance(value, list):
            raise ValidationError("must be a list of ids")
        bad = check_ids(value)
        if bad:
            raise ValidationError(_cap({i: ["must be a non-empty string"] for i in bad}))
        return value


class NumberMap(fields.Field):
    """An object from ids to numbers, checked in bulk; loads (keys, float64 values)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any
                     ) -> tuple[list[str], np.ndarray]:
        if not isinstance(value, dict):
            raise ValidationError("must be an object from ids to numbers")
        keys = list(value)
        vals, _, bad = check_numbers(list(value.values()), "number", bound=MAX_ANSWER_VALUE)
        if bad:
            detail = number_detail("number", MAX_ANSWER_VALUE)
            raise ValidationError(_cap({keys[i]: [detail] for i in bad}))
        return keys, vals


class StrictBoolean(fields.Field):
    """A JSON true or false, nothing else (marshmallow's Boolean also takes "yes", 1...)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> bool:
        if type(value) is not bool:
            raise ValidationError("must be true or false")
        return value
