"""Contract form of the diagnostic plot data (the ``plots`` of ``/v1/diagnostics``).

Every series is a JSON list; a panel that cannot be drawn keeps its layout with empty
series and says why in ``note``.  The key order is the documented one (the shipped example
shows it).
"""

from __future__ import annotations

from typing import Any

from ...core import plots as p
from .registry import contract


def _heading(h: p.Heading) -> dict[str, Any]:
    return {
        "title": h.title,
        "question": h.question,
        "reading": h.reading,
        "x_label": h.x_label,
        "y_label": h.y_label,
    }


@contract.register
def scatter(s: p.Scatter) -> dict[str, Any]:
    return {"x": list(s.x), "y": list(s.y), "row": list(s.row)}


@contract.register
def influence_points(s: p.InfluencePoints) -> dict[str, Any]:
    out: dict[str, Any] = {"x": list(s.x), "y": list(s.y), "row": list(s.row)}
    if s.leverage is not None:
        out["leverage"] = list(s.leverage)
    if s.studentized is not None:
        out["studentized"] = list(s.studentized)
    out["flag"] = list(s.flag)
    return out


@contract.register
def curve(c: p.Curve) -> dict[str, Any]:
    return {"x": list(c.x), "y": list(c.y)}


@contract.register
def smoother(s: p.Smoother) -> dict[str, Any]:
    return {"x": list(s.x), "y": list(s.y), "method": s.method, "source": s.source}


@contract.register
def reference_line(line: p.ReferenceLine) -> dict[str, Any]:
    return {"name": line.name, "x": list(line.x), "y": list(line.y)}


@contract.register
def label(lab: p.Label) -> dict[str, Any]:
    return {"row": lab.row, "x": lab.x, "y": lab.y}


@contract.register
def quartile_line(line: p.QuartileLine) -> dict[str, Any]:
    return {
        "x": list(line.x),
        "y": list(line.y),
        "slope": line.slope,
        "intercept": line.intercept,
        "method": line.method,
        "source": line.source,
    }


@contract.register
def envelope(e: p.Envelope) -> dict[str, Any]:
    return {
        "x": list(e.x),
        "lower": list(e.lower),
        "upper": list(e.upper),
        "level": e.level,
        "method": e.method,
        "source": e.source,
        "simulations": e.simulations,
        "share_inside": e.share_inside,
    }


@contract.register
def cutoff(c: p.Cutoff) -> dict[str, Any]:
    return {"name": c.name, "value": c.value}


def _optional(result: Any) -> Any:
    return None if result is None else contract(result)


def _all(results: tuple[Any, ...]) -> list[Any]:
    return [contract(r) for r in results]


@contract.register
def residuals_panel(panel: p.ResidualsPanel) -> dict[str, Any]:
    return {
        **_heading(panel.heading),
        "points": contract(panel.points),
        "smoother": _optional(panel.smoother),
        "reference_lines": _all(panel.reference_lines),
        "labels": _all(panel.labels),
        "n_total": panel.n_total,
    }


@contract.register
def spread_panel(panel: p.SpreadPanel) -> dict[str, Any]:
    out = {
        **_heading(panel.heading),
        "n_total": panel.n_total,
        "points": contract(panel.points),
        "smoother": _optional(panel.smoother),
        "reference_lines": _all(panel.reference_lines),
        "labels": _all(panel.labels),
    }
    if panel.note is not None:
        out["note"] = panel.note
    return out


@contract.register
def normal_panel(panel: p.NormalPanel) -> dict[str, Any]:
    out = {
        **_heading(panel.heading),
        "n_total": panel.n_total,
        "points": contract(panel.points),
        "reference_line": _optional(panel.reference_line),
        "envelope": _optional(panel.envelope),
        "labels": _all(panel.labels),
    }
    if panel.note is not None:
        out["note"] = panel.note
    if panel.plotting_positions is not None:
        out["plotting_positions"] = panel.plotting_positions
    return out


@contract.register
def influence_panel(panel: p.InfluencePanel) -> dict[str, Any]:
    out = {
        **_heading(panel.heading),
        "n_total": panel.n_total,
        "points": contract(panel.points),
        "cutoffs": _all(panel.cutoffs),
    }
    if panel.flag_rule is not None:
        out["flag_rule"] = panel.flag_rule
    out["labels"] = _all(panel.labels)
    if panel.note is not None:
        out["note"] = panel.note
    return out


@contract.register
def partial_residuals_panel(panel: p.PartialResidualsPanel) -> dict[str, Any]:
    return {
        "column": panel.column,
        "label": panel.label,
        **_heading(panel.heading),
        "points": contract(panel.points),
        "component": contract(panel.component),
        "smoother": _optional(panel.smoother),
        "coefficient": panel.coefficient,
        "n_total": panel.n_total,
    }


@contract.register
def diagnostic_plots(plots: p.DiagnosticPlots) -> dict[str, Any]:
    return {
        "residuals_fitted": contract(plots.residuals_fitted),
        "normal_quantiles": contract(plots.normal_quantiles),
        "spread_fitted": contract(plots.spread_fitted),
        "influence": contract(plots.influence),
        "partial_residuals": _all(plots.partial_residuals),
    }
