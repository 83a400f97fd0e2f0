"""The base of every case-file table: strict pydantic models (shared by :mod:`shellmodes.case.schema` and
:mod:`shellmodes.case.fields`)."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict

__all__ = ["Table"]


class Table(BaseModel):
    # strict: no coercion (count = true, degree = "2", radius = true are refused); TOML arrays arrive as
    # tuples (case_from_dict converts them)
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False, strict=True)
