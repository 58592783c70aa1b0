"""A dataset column and a table as declared once: the one form the ``columns_*`` modules
declare and ``meas.dataset.schema`` turns into Arrow, Parquet metadata and Table Schema."""

from __future__ import annotations

from dataclasses import dataclass
from typing import NotRequired, TypedDict


@dataclass(frozen=True)
class Col:
    name: str
    type: str  # Table Schema type: string, integer, number, datetime
    description: str
    unit: str | None = None
    required: bool = False


def col(
    name: str, type_: str, description: str, unit: str | None = None, required: bool = False
) -> Col:
    return Col(name, type_, description, unit, required)


class Reference(TypedDict):
    resource: str
    fields: list[str]


class ForeignKey(TypedDict):
    fields: list[str]
    reference: Reference


class TableSpec(TypedDict):
    """A table as ``datapackage.json`` describes it (keys spelt as Table Schema spells them)."""

    title: str
    columns: list[Col]
    primaryKey: NotRequired[list[str]]
    foreignKeys: NotRequired[list[ForeignKey]]
