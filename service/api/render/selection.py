"""Contract form of a selection body: one table's (its data, search summary, ranking,
incumbent decision, warnings, trust, cautions) and a grouped one's (one body per group).

``service_version`` comes first and ``cautions`` last, once the body is finished."""

from __future__ import annotations

from typing import Any

from ...selection import groups as g
from ...selection import search as s
from .registry import contract


@contract.register
def selection(b: s.SelectionReport) -> dict[str, Any]:
    out: dict[str, Any] = (
        {} if b.service_version is None else {"service_version": b.service_version}
    )
    out |= {"data": b.data, "search": b.search, "ranking": list(b.ranking)}
    if b.incumbent is not None:
        out["incumbent"] = b.incumbent
    out["warnings"] = list(b.warnings)
    if b.trust is not None:
        out["trust"] = b.trust
    if b.cautions is not None:
        out["cautions"] = list(b.cautions)
    return out


@contract.register
def grouped(b: g.GroupedReport) -> dict[str, Any]:
    out: dict[str, Any] = (
        {} if b.service_version is None else {"service_version": b.service_version}
    )
    out |= {
        "data": b.data,
        "search": b.search,
        "ranking": list(b.ranking),
        "groups": dict(b.groups),
        "warnings": list(b.warnings),
    }
    if b.cautions is not None:
        out["cautions"] = list(b.cautions)
    return out
