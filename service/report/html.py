"""The selection report for people: one self-contained HTML page.

:func:`render_report` turns a selection response body (exactly what ``/v1/selections``
returns as JSON) and the diagnostic plot data of its leading specifications into one page:
inline CSS, inline SVG figures drawn by :func:`service.report.figures.render_figure`, no scripts,
no fonts or images fetched from anywhere, so the page works offline, when saved to disk and
inside a dashboard's iframe.  A Content-Security-Policy ``<meta>`` forbids every fetch and
every script, so the saved file stays inert.

The page draws what it is handed and refits nothing: the plot data come from
:func:`service.selection.plots.report_plots`, built with the same functions as
``/v1/diagnostics``, so a figure in the report is the figure that endpoint draws for the
same specification.

The markup is polyglot (well-formed XML as well as HTML), and every caller-supplied string
(column names, levels, group values) passes through :func:`html.escape`.
"""

from __future__ import annotations

import html
import math
import re
from enum import Enum

from ..core.conditions import CONDITION_NAMES
from ..core.cvplus import IntervalMethod
from ..core.fitting import StandardErrors
from ..core.numbers import count_of, failure_text, fmt, fmt_p
from .figures import render_figure
from .svg import esc

#: dropped rows listed in the summary
MAX_DROPPED_LISTED = 20
#: distinct failure reasons listed in the summary
MAX_FAILURE_REASONS = 5


class ConditionWords(Enum):
    """How the report names each condition: (heading, short column title), one member per
    condition, named as :data:`~service.core.conditions.CONDITION_NAMES` names it."""

    linearity = ("Linearity", "Linear")
    normality = ("Normal residuals", "Normal")
    equal_variance = ("Equal variance", "Eq. var.")
    independence = ("Independence", "Indep.")
    multicollinearity = ("Collinearity", "Collin.")
    influence = ("Influence", "Infl.")


#: (key, heading, short title) in the order every output lists the conditions
CONDITIONS = tuple((key, *ConditionWords[key].value) for key in CONDITION_NAMES)

_MARKS = {
    True: ("pass", "\u2713", "holds"),
    False: ("fail", "\u2717", "fails"),
    None: ("none", "\u25cb", "not tested"),
}


# ------------------------------------------------------------------ formatting
def num(value, sig: int = 4) -> str:
    """``value`` by the shared number rule (``service.core.numbers.fmt``); ``None`` is a dash."""
    if value is None or not math.isfinite(float(value)):
        return "\u2013"
    return fmt(float(value), sig)


def pval(p) -> str:
    """A p-value as HTML text: ``&lt; 0.0001`` below 1e-4 (``service.core.numbers.fmt_p``)."""
    if p is None:
        return "\u2013"
    return html.escape(fmt_p(float(p)))


def _joined(items: list[str]) -> str:
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def transform_words(t: dict | None, column: str, reference: str | None = None) -> str:
    """One column on its scale in words, e.g. ``log of pipe_length_m`` (escaped HTML)."""
    t = t or {}
    name = t.get("name", "identity")
    c = f'<span class="col">{esc(column)}</span>'
    if name == "identity":
        return c
    if name == "log":
        shift = t.get("shift")
        return f"log of ({c} + {num(shift)})" if shift else f"log of {c}"
    if name == "sqrt":
        return f"square root of {c}"
    if name == "reciprocal":
        return f"reciprocal of {c}"
    if name == "square":
        return f"square of {c}"
    if name == "power":
        return f"{c} to the power {num(t.get('exponent'))}"
    if name in ("box_cox", "yeo_johnson"):
        family = "Box-Cox" if name == "box_cox" else "Yeo-Johnson"
        lam = t.get("lambda")
        if lam is None:
            return f"{family} transform of {c}"
        how = ", estimated" if t.get("estimated") else ""
        return f"{family} transform of {c} (\u03bb = {num(lam)}{how})"
    if name == "categorical":
        ref = t.get("reference") or reference
        return f"{c} (categories{', baseline ' + esc(ref) if ref is not None else ''})"
    return f"{esc(name)} of {c}"


def _box_cox_cell(bc: dict) -> str:
    """The job summary's Box-Cox cell: the estimate once, with the design it was found on.

    When the search also estimated lambda on rank 1's predictors, ``context`` already states
    both estimates and their intervals, so the cell is that sentence alone (plus the nearest
    ladder power) instead of the first estimate followed by the same numbers again.
    """
    ladder = f"; nearest ladder power {num(bc['ladder'])}" if bc.get("ladder") is not None else ""
    if bc.get("context"):
        return esc(bc["context"]) + (
            f" (On the untransformed design the nearest ladder power is {num(bc['ladder'])}.)"
            if ladder
            else ""
        )
    return (
        f"{num(bc.get('lambda'))} (95% interval {num(bc.get('ci_low'))} to "
        f"{num(bc.get('ci_high'))}{ladder}; {esc(bc.get('design', ''))})"
    )


def spec_words(spec: dict, levels: dict | None = None) -> str:
    """A specification in words (escaped HTML): response scale, then the predictors."""
    levels = levels or {}
    resp = spec["response"]
    preds = [
        transform_words(
            p.get("transform"), p["column"], (levels.get(p["column"]) or {}).get("reference")
        )
        for p in spec.get("predictors", [])
    ]
    text = f"{transform_words(resp.get('transform'), resp['column'])} on {_joined(preds)}"
    if not spec.get("intercept", True):
        text += ", without an intercept"
    return text


def _entry_words(entry: dict) -> str:
    return spec_words(entry["specification"], (entry.get("model") or {}).get("levels"))


def _mark(holds, label: str) -> str:
    kind, symbol, word = _MARKS.get(holds, _MARKS[None])
    return (
        f'<span class="mark {kind}" title="{esc(label)}: {word}" aria-hidden="true">'
        f'{symbol}</span><span class="vh">{esc(label)}: {word}</span>'
    )


def _yes_no(flag) -> str:
    return "yes" if flag else "no"


# --------------------------------------------------------------------- figures
_XML_PROLOG = re.compile(r"\A\s*(<\?xml[^>]*\?>\s*)?(<!DOCTYPE[^>]*>\s*)?", re.S)
_METADATA = re.compile(r"<metadata>.*?</metadata>\s*", re.S)
_STYLE = re.compile(r"<style[^>]*>.*?</style>\s*", re.S)
_ROOT = re.compile(r"<svg\b[^>]*>")
_VIEWBOX = re.compile(r"viewBox=\"([^\"]+)\"")
_OWN_TITLE = re.compile(r"\A\s*<title\b[^>]*>.*?</title>", re.S)


def inline_svg(svg: bytes | str, prefix: str, label: str) -> str:
    """A standalone SVG (the figure of :func:`render_figure`, or any other) made fit to sit
    inside an HTML page beside other figures.

    Drops the XML prolog, a metadata block (its namespace URLs), a document-wide
    ``<style>`` and the document's own ``<title>`` (replaced by ``label``); prefixes every id and reference
    with ``prefix`` so several figures can share a page; replaces ``xlink:href`` by the
    plain ``href`` of SVG 2 (so the page holds no namespace URL); and gives the root a
    title for assistive technology and a width that follows the page.
    """
    text = svg.decode("utf-8") if isinstance(svg, bytes) else svg
    text = _XML_PROLOG.sub("", text, count=1)
    text = _METADATA.sub("", text, count=1)
    text = _STYLE.sub("", text)
    root = _ROOT.search(text)
    if root is None:
        raise ValueError("not an SVG document")
    box = _VIEWBOX.search(root.group(0))
    view = f' viewBox="{box.group(1)}"' if box else ""
    body = _OWN_TITLE.sub("", text[root.end() :], count=1)
    body = re.sub(r"(?<=\s)id=\"([^\"]+)\"", lambda m: f'id="{prefix}-{m.group(1)}"', body)
    body = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#{prefix}-{m.group(1)})", body)
    body = re.sub(r"xlink:href=\"#([^\"]+)\"", lambda m: f'href="#{prefix}-{m.group(1)}"', body)
    # no xmlns: the HTML parser places <svg> in the SVG namespace by itself
    head = (
        f'<svg{view} role="img" '
        f'aria-labelledby="{prefix}-title" preserveAspectRatio="xMidYMid meet">'
        f'<title id="{prefix}-title">{esc(label)}</title>'
    )
    return head + body.strip()


def _figure(plots, entry: dict, prefix: str) -> str:
    label = f"Diagnostic panels for {entry['equation']}"
    if plots is None:
        return ""
    if isinstance(plots, str):
        return f'<p class="note">No figure: {esc(plots)}.</p>'
    try:
        svg = render_figure(plots, "svg", title=entry["equation"])
    except ValueError as exc:  # e.g. nothing to draw
        last = (str(exc).strip().splitlines() or ["unknown reason"])[-1]
        return f'<p class="note">No figure: it could not be drawn ({esc(last)}).</p>'
    n_partial = len(plots.partial_residuals)
    caption = (
        "Four questions about the scale: is it straight (residuals against fitted values), is "
        "the spread even (|standardised residual| against fitted values), are the residuals "
        "close to normal (departures of the ordered residuals from their normal quantiles, "
        "inside a 95% band for a normal sample) and which rows pull the fit (Cook's distance "
        "by row, coloured by the reason a row is flagged)"
    )
    if n_partial:
        caption += (
            f"; then one panel per numeric predictor ({n_partial}) asking whether its scale is "
            "right (partial residuals with the fitted effect)"
        )
    caption += (
        ". Curves are LOWESS smoothers; circled points are flagged rows, labelled with "
        "their row number in the request (rows are numbered from 1: 1 = first data row)."
    )
    return (
        f'<figure class="panels" id="{prefix}">{inline_svg(svg, prefix, label)}'
        f"<figcaption>{caption}</figcaption></figure>"
    )


# -------------------------------------------------------------------- sections
def _facts(rows: list[tuple[str, str]]) -> str:
    items = "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in rows)
    return f'<dl class="facts">{items}</dl>'


def _list(items, cls: str = "plain") -> str:
    items = list(items)
    if not items:
        return ""
    return f'<ul class="{cls}">' + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>"


def _cv_text(cv: dict | None) -> str:
    """``value ± SE``; a narrow table may break the line before the ``±``."""
    if not cv:
        return "\u2013"
    return f'{num(cv.get("value"))} <span class="se">\u00b1\u00a0{num(cv.get("std_error"))}</span>'


def _summary(body: dict, context: dict) -> str:
    data = body.get("data") or {}
    search = body.get("search") or {}
    first = _first_entry(body)
    rows = []
    if context.get("response") is not None:
        rows.append(("Response", f'<span class="col">{esc(context["response"])}</span>'))
    if context.get("predictors"):
        rows.append(
            (
                "Predictors",
                ", ".join(f'<span class="col">{esc(p)}</span>' for p in context["predictors"]),
            )
        )
    rows.append(
        (
            "Rows",
            f"{num(data.get('rows_received'))} received, "
            f"{num(data.get('rows_used'))} used, "
            f"{num(data.get('rows_dropped'))} dropped",
        )
    )
    if first is not None:
        cv = first["cv"]
        reps = cv.get("repeats", 1)
        rows.append(
            (
                "Validation",
                f"{cv.get('folds')}-fold cross-validation"
                + (f", repeated {reps} times" if reps and reps > 1 else "")
                + f" (seed {esc(cv.get('seed', 0))}); error: {esc(cv.get('metric'))} on the "
                f"{esc(cv.get('scale', 'original'))} scale of the response"
                + (
                    f", scoring the {esc(cv['back_transform'])}" if cv.get("back_transform") else ""
                ),
            )
        )
    if context.get("alpha") is not None:
        rows.append(
            (
                "Condition tests",
                f"significance level {num(context['alpha'])}"
                + (
                    f'; observation order from <span class="col">{esc(context["order"])}</span>'
                    if context.get("order")
                    else "; no order column, so independence is not tested"
                ),
            )
        )
    if "groups" in search:
        rows.append(
            (
                "Groups",
                f"{num(search['groups'])} values of "
                f'<span class="col">{esc(context.get("group_by", ""))}</span>, '
                f"{num(search.get('groups_failed', 0))} could not be modelled",
            )
        )
    else:
        rows.append(
            (
                "Search",
                f"{num(search.get('candidates_considered'))} candidate "
                f"specifications, {num(search.get('candidates_scored'))} scored, "
                f"{num(search.get('candidates_failed', 0))} could not be scored",
            )
        )
    complete = search.get("complete")
    rows.append(
        (
            "Completeness",
            "complete: every candidate was scored"
            if complete
            else "<strong>incomplete</strong>: the search stopped at its limits; the ranking "
            "is the best found so far",
        )
    )
    if search.get("elapsed_s") is not None:
        rows.append(("Search time", f"{num(search['elapsed_s'])} s"))
    bc = search.get("box_cox")
    if bc:
        rows.append(("Box-Cox \u03bb of the response", _box_cox_cell(bc)))
    band = search.get("band")
    if band:
        rows.append(
            (
                "Ranking band",
                f"CV error at most {num(band.get('threshold'))}: the lowest "
                f"({num(band.get('lowest_cv_value'))}) plus its standard error "
                f"({num(band.get('std_error_of_lowest'))}); inside it the simplest "
                "specification ranks first",
            )
        )
    out = ['<section id="summary"><h2>Job summary</h2>', _facts(rows)]
    dropped = data.get("dropped") or []
    if dropped:
        shown = dropped[:MAX_DROPPED_LISTED]
        out.append(
            f"<h3>Dropped rows</h3><p>{count_of(int(data.get('rows_dropped') or 0), 'row')} "
            "were left "
            f"out; the first {len(shown)} listed (rows are numbered from 1: 1 = first data "
            "row).</p>"
        )
        out.append(
            '<table class="compact"><thead><tr><th class="n">Row</th><th>Reason</th>'
            "</tr></thead><tbody>"
            + "".join(
                f'<tr><td class="n">{esc(d.get("row"))}</td><td>{esc(d.get("reason"))}</td></tr>'
                for d in shown
            )
            + "</tbody></table>"
        )
    groups = search.get("failure_reasons") or []
    if groups:
        failed = int(search.get("candidates_failed") or sum(g["candidates"] for g in groups))
        out.append(
            f"<h3>Candidates that could not be scored</h3><p>"
            f"{count_of(failed, 'candidate')} got no score, by reason:</p>"
            + _list(
                failure_text(g["reason"], g["candidates"], g["wordings"])
                for g in groups[:MAX_FAILURE_REASONS]
            )
        )
    out.append("</section>")
    return "".join(out)


def _first_entry(body: dict) -> dict | None:
    if body.get("ranking"):
        return body["ranking"][0]
    for gbody in (body.get("groups") or {}).values():
        if gbody.get("ranking"):
            return gbody["ranking"][0]
    return None


def _why(entry: dict) -> str:
    parts = (entry.get("score") or {}).get("parts") or {}
    cv = entry.get("cv") or {}
    metric = esc(cv.get("metric", "error"))
    best = parts.get("best_cv_value")
    out = []
    value = cv.get("value")
    if best is not None and value is not None and value <= best:
        out.append(f"It has the lowest cross-validated {metric} ({num(cv.get('value'))}).")
    elif parts.get("within_one_se"):
        out.append(
            f"Its cross-validated {metric} ({num(cv.get('value'))}) is inside the band: at "
            f"most {num(parts.get('one_se_threshold'))}, the lowest ({num(best)}) plus the "
            "standard error of the lowest-error specification; inside the band the simpler "
            "one ranks first."
        )
    else:
        out.append(
            f"Its cross-validated {metric} is {num(cv.get('value'))}; it is ranked by error."
        )
    conds = entry.get("conditions") or {}
    failed = [
        label.lower()
        for key, label, _ in CONDITIONS
        if (conds.get(key) or {}).get("holds") is False
    ]
    untested = [
        label.lower()
        for key, label, _ in CONDITIONS
        if key in conds and conds[key].get("holds") is None
    ]
    if failed:
        out.append(f"It fails the check of {esc(_joined(failed))}.")
    else:
        out.append(
            "It passes every condition that was tested"
            + (f" ({esc(_joined(untested))} not tested)." if untested else ".")
        )
    return " ".join(out)


def _recommendation(body: dict) -> str:
    entry = body["ranking"][0] if body.get("ranking") else None
    if entry is None:
        return ""
    inc = body.get("incumbent")
    verdict = ""
    if inc and inc.get("decision"):
        decision = esc(str(inc["decision"]).lower())
        verdict = (
            f'<p>Incumbent: <span class="badge {decision}">{decision.upper()}</span> '
            f'{esc(inc.get("reason", ""))} (<a href="#incumbent">details</a>)</p>'
        )
    return (
        '<div class="callout" id="recommendation"><p class="kicker">Rank 1</p>'
        f'<p class="lead">{_entry_words(entry)}</p>'
        f'<p>{_why(entry)} See the <a href="#cautions">cautions</a> before relying on '
        f"it.</p>{verdict}</div>"
    )


def _incumbent(inc: dict | None, ident: str = "incumbent", level: int = 2) -> str:
    if not inc:
        return ""
    decision = str(inc.get("decision", "")).lower()
    spec = inc.get("specification")
    rows = [
        ("Decision", f'<span class="badge {esc(decision)}">{esc(decision.upper())}</span>'),
        ("Reason", esc(inc.get("reason", ""))),
    ]
    if spec:
        rows.append(("Incumbent", spec_words(spec)))
    rows.append(
        ("Its rank in this run", esc(inc["rank"]) if inc.get("rank") is not None else "not ranked")
    )
    if inc.get("cv"):
        rows.append((f"Its CV {esc(inc['cv'].get('metric', ''))} \u00b1 SE", _cv_text(inc["cv"])))
    diff = inc.get("difference")
    if diff:
        rows.append(
            (
                "Rank 1 minus incumbent",
                f"{num(diff.get('value'))} (paired standard "
                f"error {num(diff.get('std_error'))}); negative means rank 1 predicts "
                "better",
            )
        )
    return (
        f'<section class="incumbent" id="{ident}"><h{level}>Incumbent specification'
        f"</h{level}>" + _facts(rows) + "</section>"
    )


def _ranking_table(entries: list[dict], detail_ids: dict) -> str:
    if not entries:
        return "<p>No specification was ranked.</p>"
    metric = esc(entries[0]["cv"].get("metric", "error"))
    head = (
        '<thead><tr><th class="n" scope="col">Rank</th>'
        '<th scope="col">Specification</th>'
        f'<th class="n" scope="col">CV {metric} \u00b1 SE</th>'
        '<th class="n" scope="col">Above lowest</th>'
        '<th scope="col">Within 1 SE</th>'
        + "".join(
            f'<th class="c" scope="col"><abbr title="{label}">{short}</abbr></th>'
            for _, label, short in CONDITIONS
        )
        + "</tr></thead>"
    )
    rows = []
    for e in entries:
        parts = (e.get("score") or {}).get("parts") or {}
        conds = e.get("conditions") or {}
        cells = "".join(
            f'<td class="c{" fail" if (conds.get(k) or {}).get("holds") is False else ""}">'
            f"{_mark((conds.get(k) or {}).get('holds'), label)}</td>"
            for k, label, _ in CONDITIONS
        )
        anchor = detail_ids.get(e["rank"])
        words = _entry_words(e)
        if anchor:
            words = f'<a href="#{anchor}">{words}</a>'
        rows.append(
            f'<tr><td class="n">{esc(e["rank"])}</td><td>{words}</td>'
            f'<td class="n cv">{_cv_text(e.get("cv"))}</td>'
            f'<td class="n">{num(parts.get("difference_from_best"))}</td>'
            f"<td>{_yes_no(parts.get('within_one_se'))}</td>{cells}</tr>"
        )
    legend = (
        '<p class="legend">Conditions: <span aria-hidden="true">\u2713</span> holds, '
        '<span aria-hidden="true">\u2717</span> fails, '
        '<span aria-hidden="true">\u25cb</span> not tested. CV errors are on the original '
        "scale of the response, so every row is comparable; \u201cabove lowest\u201d is the "
        "difference from the lowest CV error of the whole search.</p>"
    )
    return legend + f'<table class="ranking">{head}<tbody>{"".join(rows)}</tbody></table>'


_SE_WORDS = {
    StandardErrors.CLASSICAL: "classical",
    StandardErrors.HC3: "HC3 (heteroscedasticity-consistent)",
    StandardErrors.HAC: "Newey-West (serial-correlation-consistent)",
}


def _se_kind(entry: dict) -> StandardErrors:
    kind = (entry.get("inference") or {}).get("standard_errors")
    return StandardErrors(kind) if kind in _SE_WORDS else StandardErrors.CLASSICAL


def _se_line(entry: dict) -> str:
    inf = entry.get("inference") or {}
    kind = _se_kind(entry)
    hac = kind is StandardErrors.HAC and inf.get("hac_lags") is not None
    lags = f", {inf['hac_lags']} lags" if hac else ""
    return f"{_SE_WORDS[kind]}{lags}: {esc(inf.get('reason', ''))}"


_PI_WORDS = {
    IntervalMethod.NORMAL: "normal theory (t interval on the model scale)",
    IntervalMethod.CV_PLUS: "CV+ (from the out-of-fold residuals; no normality needed)",
}


def _pi_line(entry: dict) -> str:
    inf = entry.get("inference") or {}
    kind = inf.get("prediction_intervals", "normal")
    words = _PI_WORDS.get(kind, _PI_WORDS[IntervalMethod.NORMAL])
    reason = inf.get("prediction_interval_reason")
    return f"{words}: {esc(reason)}" if reason else words


def _coefficients(entry: dict) -> str:
    kind = _se_kind(entry)
    sfx = "" if kind is StandardErrors.CLASSICAL else f"_{kind}"
    rows = "".join(
        f'<tr><td><code>{esc(c["term"])}</code></td><td class="n est">{num(c.get("estimate"))}</td>'
        f'<td class="n">{num(c.get("std_error" + sfx))}</td>'
        f'<td class="n">{num(c.get("t_statistic" + sfx))}</td>'
        f'<td class="n">{pval(c.get("p_value" + sfx))}</td>'
        f'<td class="n">{num(c.get("ci_low" + sfx))} to {num(c.get("ci_high" + sfx))}</td></tr>'
        for c in entry.get("coefficients", [])
    )
    scale = esc(entry["equation"].split(" = ")[0]) if " = " in entry.get("equation", "") else ""
    return (
        '<table class="coefficients"><caption>Coefficients on the model scale'
        + (f" (<code>{scale}</code>)" if scale else "")
        + "</caption><thead><tr>"
        '<th scope="col">Term</th><th class="n" scope="col">Estimate</th>'
        '<th class="n" scope="col">Give or take (SE)</th>'
        '<th class="n" scope="col">Estimate / SE</th>'
        '<th class="n" scope="col">p if the term adds nothing</th>'
        '<th class="n" scope="col">95% range</th>'
        f"</tr></thead><tbody>{rows}</tbody></table>"
    )


def _conditions(entry: dict) -> str:
    conds = entry.get("conditions") or {}
    rows = []
    for key, label, _ in CONDITIONS:
        c = conds.get(key)
        if c is None:
            continue
        kind, symbol, word = _MARKS.get(c.get("holds"), _MARKS[None])
        tests = "; ".join(
            f"{esc(t.get('name', ''))}: {num(t.get('statistic'))}"
            + (f", p = {pval(t['p_value'])}" if t.get("p_value") is not None else "")
            for t in c.get("tests", [])
        )
        rows.append(
            f'<tr><th scope="row">{label}</th>'
            f'<td class="{"fail" if kind == "fail" else ""}"><span class="mark {kind}" '
            f'aria-hidden="true">{symbol}</span> {word}</td>'
            f"<td>{esc(c.get('note', ''))}"
            + (f'<div class="tests">{tests}</div>' if tests else "")
            + "</td></tr>"
        )
    if not rows:
        return ""
    return (
        '<table class="conditions"><caption>Regression conditions</caption><thead><tr>'
        '<th scope="col">Condition</th><th scope="col">Result</th>'
        '<th scope="col">What the tests say</th></tr></thead><tbody>'
        + "".join(rows)
        + "</tbody></table>"
    )


def _detail(entry: dict, plots, anchor: str, heading: str, level: int = 2) -> str:
    fit = entry.get("fit") or {}
    cv = entry.get("cv") or {}
    parts = (entry.get("score") or {}).get("parts") or {}
    r2_scale = "model scale" if fit.get("r_squared_scale") == "model" else "original scale"
    facts = [
        ("Equation", f'<code class="eq">{esc(entry["equation"])}</code>'),
        (f"CV {esc(cv.get('metric', ''))} \u00b1 SE", _cv_text(cv)),
        ("Rows in the fit", num(fit.get("n"))),
        (
            f"R\u00b2 ({r2_scale})",
            num(fit.get("r_squared"))
            + (
                f"; on the original scale {num(fit['r_squared_original_scale'])}"
                if fit.get("r_squared_original_scale") is not None
                and fit.get("r_squared_scale") == "model"
                else ""
            ),
        ),
        ("Residual standard deviation", f"{num(fit.get('residual_sd'))} (model scale)"),
        ("Standard errors", _se_line(entry)),
        ("Prediction intervals", _pi_line(entry)),
        ("How it was ranked", esc(parts.get("rule", ""))),
    ]
    sub = level + 1
    out = [
        f'<section class="detail" id="{anchor}"><h{level}>{heading}</h{level}>',
        f'<p class="lead">{_entry_words(entry)}</p>',
        _facts(facts),
        _figure(plots, entry, f"{anchor}-fig"),
        _coefficients(entry),
    ]
    if entry.get("interpretation"):
        out.append(f"<h{sub}>What the coefficients say</h{sub}>" + _list(entry["interpretation"]))
    out.append(_conditions(entry))
    if entry.get("warnings"):
        out.append(
            f'<h{sub} class="entry-notes">Points to check in this specification</h{sub}>'
            + _list(entry["warnings"], "plain warn")
        )
    out.append("</section>")
    return "".join(out)


def _selection(body: dict, plots: dict, group, prefix: str, level: int = 2) -> str:
    """Ranking and detail sections of one selection body."""
    entries = body.get("ranking") or []
    detail = [e for e in entries if (group, e["rank"]) in plots]
    ids = {e["rank"]: f"{prefix}rank-{e['rank']}" for e in detail}
    title = "Ranking" if group is None else "Ranking in this group"
    out = [
        f'<section id="{prefix}ranking"><h{level}>{title}</h{level}>',
        _ranking_table(entries, ids),
        "</section>",
    ]
    for e in detail:
        out.append(
            _detail(
                e,
                plots[(group, e["rank"])],
                ids[e["rank"]],
                f"Rank {esc(e['rank'])}" + (f" in group {esc(group)}" if group is not None else ""),
                level,
            )
        )
    return "".join(out)


def _groups(body: dict, plots: dict) -> str:
    out = []
    for i, (name, gbody) in enumerate((body.get("groups") or {}).items()):
        gid = f"g{i + 1}-"
        out.append(f'<section class="group" id="{gid}group"><h2>Group {esc(name)}</h2>')
        problem = gbody.get("problem")
        if problem:
            out.append(
                f'<p class="problem"><strong>Could not be modelled:</strong> '
                f"{esc(problem.get('detail', ''))}</p>"
            )
            out.append(_list([e.get("detail", "") for e in problem.get("errors", [])]))
            out.append("</section>")
            continue
        data = gbody.get("data") or {}
        search = gbody.get("search") or {}
        out.append(
            f"<p>{num(data.get('rows_used'))} rows; "
            f"{num(search.get('candidates_scored'))} of "
            f"{num(search.get('candidates_considered'))} candidates scored"
            + ("" if search.get("complete", True) else "; <strong>incomplete</strong>")
            + ".</p>"
        )
        if gbody.get("ranking"):
            out.append(
                f"<p>Rank 1: {_entry_words(gbody['ranking'][0])}. {_why(gbody['ranking'][0])}</p>"
            )
        out.append(_incumbent(gbody.get("incumbent"), f"{gid}incumbent", level=3))
        out.append(_selection(gbody, plots, name, gid, level=3))
        if gbody.get("warnings"):
            out.append(
                f'<section class="search-notes" id="{gid}search-notes"><h3>About this group\'s '
                "search as a whole</h3><p>These notes concern the search in this group, not "
                "one specification.</p>" + _list(gbody["warnings"], "plain warn") + "</section>"
            )
        out.append("</section>")
    return "".join(out)


def _trust(trust: dict | None) -> str:
    """Whatever the trust block reports, as label and value pairs."""
    if not trust:
        return ""
    rows = []
    for key, value in trust.items():
        label = esc(str(key).replace("_", " ").capitalize())
        if isinstance(value, dict):
            said = value.get("sentence") or value.get("note")
            if said:
                rows.append((label, esc(said)))
                continue
            rows.append(
                (
                    label,
                    "; ".join(
                        f"{esc(str(k).replace('_', ' '))} {_scalar(v)}"
                        for k, v in value.items()
                        if isinstance(v, (int, float, str))
                    ),
                )
            )
        elif isinstance(value, (int, float, str)):
            rows.append((label, _scalar(value)))
    return '<section id="trust"><h2>How far to trust the choice</h2>' + _facts(rows) + "</section>"


def _scalar(value) -> str:
    if isinstance(value, bool):
        return _yes_no(value)
    if isinstance(value, (int, float)):
        return num(value)
    return esc(value)


def _contents(body: dict, plots: dict) -> str:
    links = [("summary", "Job summary")]
    if body.get("warnings"):
        links.append(("warnings", "About the search as a whole"))
    if body.get("incumbent"):
        links.append(("incumbent", "Incumbent specification"))
    if body.get("groups"):
        links += [
            (f"g{i + 1}-group", f"Group {esc(name)}") for i, name in enumerate(body["groups"])
        ]
    else:
        links.append(("ranking", "Ranking"))
        links += [
            (f"rank-{r}", f"Rank {r} in detail")
            for g, r in sorted((k for k in plots if k[0] is None), key=lambda k: k[1])
        ]
    if body.get("trust"):
        links.append(("trust", "How far to trust the choice"))
    links.append(("cautions", "Cautions"))
    return (
        '<nav aria-label="Contents"><ol>'
        + "".join(f'<li><a href="#{a}">{t}</a></li>' for a, t in links)
        + "</ol></nav>"
    )


# ------------------------------------------------------------------------ page
CSS = """
:root{--ink:#1f2933;--muted:#52606d;--rule:#d3d8de;--soft:#f3f5f7;--accent:#2f5d8a;
--pass:#1c6b3c;--fail:#a3211f;--failbg:#fbeaea}
*{box-sizing:border-box}
html{-webkit-text-size-adjust:100%;text-size-adjust:100%}
body{margin:0;background:#fff;color:var(--ink);
font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,"DejaVu Sans",sans-serif}
main{max-width:1120px;margin:0 auto;padding:28px 32px 56px}
header{border-bottom:3px solid var(--ink);padding-bottom:.8rem}
h1{font-size:1.75rem;line-height:1.2;margin:0 0 .3rem}
h2{font-size:1.3rem;margin:2.4rem 0 .7rem;padding-bottom:.25rem;border-bottom:1px solid var(--ink)}
h3{font-size:1.05rem;margin:1.5rem 0 .4rem}
h4{font-size:.98rem;margin:1.3rem 0 .35rem}
section.group h3{font-size:1.15rem}
p{margin:.5rem 0}
a{color:var(--accent)}
.sub{color:var(--muted);margin:0}
.kicker{text-transform:uppercase;letter-spacing:.08em;font-size:.75rem;font-weight:700;
color:var(--muted);margin:0}
.lead{font-size:1.1rem;font-weight:600;margin:.2rem 0 .5rem}
.callout{border-left:5px solid var(--accent);background:var(--soft);padding:.9rem 1.1rem;margin:1.4rem 0}
.col{font-family:ui-monospace,"DejaVu Sans Mono",Menlo,Consolas,monospace;font-size:.92em;
font-weight:inherit;overflow-wrap:anywhere}
code{font-family:ui-monospace,"DejaVu Sans Mono",Menlo,Consolas,monospace;font-size:.88em;
overflow-wrap:anywhere}
code.eq{display:block;background:var(--soft);padding:.45rem .7rem;border-radius:3px}
nav{margin:1rem 0 0;font-size:.92rem}
nav ol{margin:0;padding-left:1.3rem;columns:2;column-gap:2.5rem}
table{border-collapse:collapse;width:100%;margin:.5rem 0 1.2rem;font-size:.9rem}
caption{text-align:left;font-weight:700;padding:.2rem 0 .35rem;font-size:1rem}
th,td{padding:.38rem .5rem;border-bottom:1px solid var(--rule);text-align:left;vertical-align:top}
thead th{border-bottom:2px solid var(--ink);font-weight:650;vertical-align:bottom;white-space:normal}
tbody th{font-weight:600;white-space:nowrap}
.n{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
.c{text-align:center;white-space:nowrap}
td.cv{white-space:normal}
.se{white-space:nowrap}
table.ranking td:nth-child(2){min-width:13rem}
table.ranking a{color:inherit;text-decoration:underline;text-decoration-color:var(--rule);
text-underline-offset:.2em}
table.ranking a:hover{text-decoration-color:var(--accent)}
table.conditions td:nth-child(2){white-space:nowrap}
table.compact{width:auto}
abbr{text-decoration:none;border-bottom:1px dotted var(--muted)}
.mark{display:inline-block;min-width:1.2em;font-weight:700;text-align:center}
.mark.pass{color:var(--pass)}
.mark.fail{color:var(--fail)}
.mark.none{color:var(--muted)}
td.fail{background:var(--failbg)}
.tests{color:var(--muted);font-size:.82rem;margin-top:.2rem}
.legend{color:var(--muted);font-size:.85rem}
.vh{position:absolute;width:1px;height:1px;margin:-1px;padding:0;overflow:hidden;
clip:rect(0 0 0 0);clip-path:inset(50%);white-space:nowrap;border:0}
dl.facts{display:grid;grid-template-columns:max-content minmax(0,1fr);gap:.3rem 1.4rem;margin:.5rem 0 1.1rem}
dl.facts dt{color:var(--muted)}
dl.facts dd{margin:0}
figure{margin:1.2rem 0;padding:0;break-inside:avoid}
figure svg{display:block;width:100%;height:auto;border:1px solid var(--rule)}
figcaption{color:var(--muted);font-size:.84rem;margin-top:.35rem}
ul.plain{padding-left:1.2rem;margin:.4rem 0 1rem}
ul.plain li{margin:.3rem 0}
ul.warn li::marker{content:"! ";font-weight:700;color:var(--fail)}
.badge{display:inline-block;border:2px solid currentColor;padding:0 .5rem;font-weight:700;
letter-spacing:.06em}
.badge.switch{color:var(--fail)}
.badge.keep{color:var(--pass)}
.note,.problem{color:var(--muted)}
section.group{border-top:3px double var(--rule);margin-top:2.5rem}
footer{margin-top:3rem;padding-top:.6rem;border-top:1px solid var(--rule);color:var(--muted);
font-size:.82rem}
@media (max-width:760px){main{padding:16px}nav ol{columns:1}
table.ranking td:nth-child(2){min-width:9rem}
table{font-size:.84rem}
th,td{padding:.3rem .3rem}}
@page{margin:14mm 12mm}
@media print{
body{font-size:9.5pt;line-height:1.4}
main{max-width:none;padding:0}
nav{display:none}
a{color:inherit;text-decoration:none}
section.detail,section.group{break-before:page}
h2,h3,h4,caption{break-after:avoid}
tr,figure,dl.facts{break-inside:avoid}
table{font-size:8.5pt}
th,td{padding:.25rem .3rem}
table.ranking td:nth-child(2){min-width:0}
.callout,code.eq{background:none;border:1px solid #888}
td.fail{background:none;font-weight:700}
figure svg{border:0}
}
"""

#: no fetch of any kind, no scripts; inline styles only
CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; form-action 'none'; base-uri 'none'"


def render_report(body: dict, plots: dict | None = None, context: dict | None = None) -> str:
    """The whole page for one selection response ``body`` (a JSON-ready dict).

    ``plots`` maps ``(group or None, rank)`` to the plot data of that ranked
    specification (see :func:`report_plots`); those specifications are shown in detail.
    ``context`` may carry request fields the response does not echo: ``response``,
    ``predictors``, ``alpha``, ``order``, ``group_by``.
    """
    plots = plots or {}
    context = context or {}
    first = _first_entry(body)
    response = context.get("response") or (
        first["specification"]["response"]["column"] if first else ""
    )
    version = esc(body.get("service_version", ""))
    parts = [
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"/>',
        '<meta name="viewport" content="width=device-width, initial-scale=1"/>',
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}"/>',
        f'<meta name="generator" content="Bestscale {version}"/>',
        f"<title>Scale selection for {esc(response)}</title>",
        f"<style>{CSS}</style></head><body><main>",
        '<header><p class="kicker">Bestscale scale selection report</p>',
        f'<h1>On which scale to model <span class="col">{esc(response)}</span></h1>',
        '<p class="sub">Every candidate specification was scored by cross-validated error on '
        "the original scale of the response and checked against the regression conditions. "
        "This page shows the same numbers as the JSON response.</p>",
        _contents(body, plots),
        "</header>",
        _recommendation(body),
        _summary(body, context),
    ]
    if body.get("warnings"):
        # before the ranking, so these notes on the whole search never read as the last
        # specification's own
        parts.append(
            '<section class="search-notes" id="warnings"><h2>About the search as a whole</h2>'
            "<p>These notes concern the whole search (its candidates, data and options), not "
            "one specification; each specification's own points to check are listed with it."
            "</p>" + _list(body["warnings"], "plain warn") + "</section>"
        )
    parts.append(_incumbent(body.get("incumbent")))
    if body.get("groups"):
        parts.append(_groups(body, plots))
    else:
        parts.append(_selection(body, plots, None, ""))
    parts.append(_trust(body.get("trust")))
    parts.append(
        '<section id="cautions"><h2>Cautions</h2>'
        "<p>Read these before acting on the ranking; it supports your own review of "
        "the model and does not replace it.</p>" + _list(body.get("cautions") or []) + "</section>"
    )
    parts.append(
        f"<footer>Bestscale {version}. The same request always gives the same "
        "ranking; the machine-readable result is the JSON response of "
        "<code>POST /v1/selections</code> for this request.</footer>"
    )
    parts.append("</main></body></html>\n")
    return "".join(parts)
