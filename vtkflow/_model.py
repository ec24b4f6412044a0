"""The base of every recipe model: frozen, and unknown keys are errors that name the closest valid key."""

from __future__ import annotations

import difflib
from typing import Any

from pydantic import BaseModel, ConfigDict, model_validator

__all__ = ["Strict"]


class Strict(BaseModel):
    """Frozen pydantic model whose unknown keys raise ``unknown key 'evry'; did you mean 'every'?``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    @model_validator(mode="before")
    @classmethod
    def _known_keys(cls, data: Any) -> Any:
        if isinstance(data, dict):
            valid = list(cls.model_fields)
            for key in data:
                if key not in cls.model_fields:
                    close = difflib.get_close_matches(str(key), valid, n=1, cutoff=0.5)
                    hint = f"did you mean {close[0]!r}?" if close else f"valid keys: {', '.join(valid)}"
                    raise ValueError(f"unknown key {key!r}; {hint}")
        return data
