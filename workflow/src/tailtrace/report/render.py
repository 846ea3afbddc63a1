"""Turn :class:`ReportContent` into one self-contained HTML page.

Every text that comes from data (portfolio, method, instrument, file names,
details) passes through :func:`tailtrace.report.markup.esc`. The page loads
nothing: styles are inline, charts are ``data:`` images, and a content
security policy forbids scripts and remote resources.
"""

from __future__ import annotations

import base64
from typing import Any

import pandas as pd

from tailtrace import __version__
from tailtrace.report.content import Chart, ReportContent
from tailtrace.report.limits import STATUS_BREACH, STATUS_MISSING, STATUS_NEAR, STATUS_OK
from tailtrace.report.markup import (
    NA,
    attrs,
    data_value,
    esc,
    fmt_amount,
    fmt_confidence,
    fmt_date,
    fmt_percent,
    fmt_pvalue,
    is_number,
    table,
)
from tailtrace.report.style import CSS

__all__ = ["render_html", "NOT_COMPUTED"]

NOT_COMPUTED = "not computed in this run"
_CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'"
_SCALING = {
    "sqrt_time": ("√t", "scaled from the 1-day figure by the square root of the horizon"),
    "overlapping": ("ovl", "from overlapping multi-day historical returns"),
    "simulated": ("sim", "simulated in daily steps over the horizon"),
}
_STATUS_TEXT = {STATUS_BREACH: "BREACH", STATUS_NEAR: "near limit", STATUS_OK: "within limit",
                STATUS_MISSING: "no figure"}
_STATUS_CLASS = {STATUS_BREACH: "tag-breach", STATUS_NEAR: "tag-near", STATUS_OK: "tag-ok",
                 STATUS_MISSING: "tag-missing"}
_METRIC = {"var": "VaR", "es": "ES"}
_P_REJECT = 0.05  # test level of the p-value notes (common practice, no source)
_SECTIONS = (
    ("limits", "Limits"), ("headline", "VaR and ES"), ("disagreement", "Model disagreement"),
    ("backtest", "Backtest"), ("contributors", "Top contributors"), ("quality", "Data quality"),
    ("charts", "Charts"), ("cautions", "Cautions"),
)


def _th(label: str, *, scope: str = "col", cls: str | None = None, sub: str | None = None) -> str:
    extra = f'<span class="sub">{sub}</span>' if sub else ""
    return f"<th{attrs({'scope': scope, 'class': cls})}>{label}{extra}</th>"


def _td(text: str, *, cls: str | None = None, **data: Any) -> str:
    return f"<td{attrs({'class': cls, **{'data-' + k.replace('_', '-'): v for k, v in data.items()}})}>{text}</td>"


def _num(value: object, decimals: int = 0, **data: Any) -> str:
    if not is_number(value):
        return _td(NA, cls="na", **data)
    return _td(fmt_amount(value, decimals), cls="num", value=data_value(value), **data)


def _tag(text: str, cls: str) -> str:
    return f'<span class="tag {esc(cls)}">{esc(text)}</span>'


def _notice(text: str) -> str:
    return f'<p class="notice">{text}</p>'


def _section(key: str, title: str, body: str) -> str:
    return f'<section id="{key}" aria-labelledby="{key}-h"><h2 id="{key}-h">{esc(title)}</h2>{body}</section>'


def _unavailable(key: str, title: str, frame: pd.DataFrame | None, absent: str, empty: str) -> str:
    """The section of a table that is absent (says ``absent`` not computed) or has no rows (says ``empty``)."""
    if frame is None:
        return _section(key, title, _notice(f"{absent} {NOT_COMPUTED}."))
    return _section(key, title, empty)


def _header(c: ReportContent) -> str:
    o = c.options
    runs = ", ".join(esc(r) for r in c.run_ids) or NA
    lines = [
        f"<h1>{esc(o.title)}</h1>",
        f'<p class="meta">As of <strong><time datetime="{c.as_of.isoformat()}">{c.as_of.isoformat()}</time>'
        f"</strong> · base currency <strong>{esc(o.base_currency)}</strong> · headline method "
        f"<strong>{esc(o.headline_method)}</strong> · run <strong>{runs}</strong></p>",
    ]
    other = [cur for cur in c.currencies if cur != o.base_currency]
    if other:
        lines.append(_notice(f"Some figures are stated in {esc(', '.join(other))}, not in the base currency "
                             f"{esc(o.base_currency)}: check the pipeline configuration."))
    toc = "".join(f'<li><a href="#{k}">{esc(t)}</a></li>' for k, t in _SECTIONS)
    lines.append(f'<nav class="toc" aria-label="Contents"><ol>{toc}</ol></nav>')
    return f'<header class="page">{"".join(lines)}</header>'


def _limit_rows(frame: pd.DataFrame, decimals: int) -> list[str]:
    rows = []
    for r in frame.itertuples(index=False):
        util = r.utilisation
        gauge = ""
        if is_number(util):
            width = min(float(util), 1.0) * 100
            over = " over" if float(util) > 1.0 else ""
            gauge = f'<span class="gauge{over}" aria-hidden="true"><span style="width:{width:.0f}%"></span></span>'
        key = dict(portfolio=r.portfolio, metric=r.metric, confidence=repr(float(r.confidence)),
                   horizon=int(r.horizon_days), method=r.method)
        rows.append(
            f"<tr>{_td(_tag(_STATUS_TEXT[r.status], _STATUS_CLASS[r.status]), status=r.status)}"
            f'<th scope="row">{esc(r.portfolio)}</th>{_td(_METRIC[r.metric])}{_td(fmt_confidence(r.confidence))}'
            f"{_td(f'{int(r.horizon_days)}-day')}{_td(esc(r.method))}"
            f"{_num(r.figure, decimals, role='figure', **key)}{_num(r.limit, decimals, role='limit', **key)}"
            f"{_td(fmt_percent(util) + gauge, cls='num')}{_num(r.headroom, decimals)}{_td(str(int(r.line)), cls='num')}"
            "</tr>"
        )
    return rows


def _limit_header() -> list[str]:
    return [_th(h) for h in ("Status", "Portfolio", "Measure", "Confidence", "Horizon", "Method")] + [
        _th(h, cls="num") for h in ("Figure", "Limit", "Utilisation", "Headroom", "Line")
    ]


def _limits_section(c: ReportContent) -> str:
    o = c.options
    if c.utilisation is None:
        return _section("limits", "Limits", _notice("No limits file was given for this run: limits not checked."))
    util = c.utilisation
    if util.empty:
        return _section("limits", "Limits", _notice(f"The limits file {esc(c.limits_file)} defines no limits."))
    counts = util["status"].value_counts()
    n_breach, n_near, n_missing = (int(counts.get(s, 0)) for s in (STATUS_BREACH, STATUS_NEAR, STATUS_MISSING))
    parts = []
    if n_breach:
        word = "breach" if n_breach == 1 else "breaches"
        parts.append(f'<div class="banner banner-breach" role="alert"><p class="banner-title">{n_breach} limit '
                     f"{word} on {c.as_of.isoformat()}</p><p>The figures below exceed their limits; follow the "
                     f"escalation steps of the firm's risk policy.</p></div>")
        parts.append(table(f"Limit breaches <span class=\"sub\">(amounts in {esc(o.base_currency)})</span>",
                           _limit_header(), _limit_rows(util[util["status"] == STATUS_BREACH], o.decimals),
                           cls="breaches"))
    else:
        kind = "banner-near" if n_near or n_missing else "banner-clear"
        parts.append(f'<div class="banner {kind}"><p class="banner-title">No limit breached</p>'
                     f"<p>{len(util)} limits checked against the figures of {c.as_of.isoformat()}.</p></div>")
    notes = []
    if n_near:
        notes.append(f"{n_near} limit{'s' if n_near != 1 else ''} at or above {fmt_percent(o.near_limit, 0)} "
                     "utilisation")
    if n_missing:
        notes.append(f"{n_missing} limit{'s' if n_missing != 1 else ''} could not be checked: no matching figure "
                     "(portfolio, measure, confidence, horizon or method not computed)")
    if notes:
        parts.append(f"<p><strong>Attention:</strong> {'; '.join(notes)}.</p>")
    parts.append(table(
        f"Utilisation of all limits <span class=\"sub\">(from {esc(c.limits_file)}; utilisation = figure / limit; "
        f"amounts in {esc(o.base_currency)})</span>",
        _limit_header(), _limit_rows(util, o.decimals), cls="utilisation"))
    return _section("limits", "Limits", "".join(parts))


def _scaling_marker(label: object) -> str:
    if not isinstance(label, str) or label in ("", "none"):
        return ""
    short, title = _SCALING.get(label, (label, f"horizon obtained by: {label}"))
    return f' <abbr class="scl" title="{esc(title)}">{esc(short)}</abbr>'


def _uniform_scaling(fig: pd.DataFrame) -> dict[str, str]:
    """Methods whose multi-day figures all share one scaling label (shown once, in the header)."""
    multi = fig[fig["horizon_days"] > 1]
    labels = multi.groupby("method")["scaling"].agg(lambda s: tuple(sorted({str(v) for v in s})))
    return {m: v[0] for m, v in labels.items() if len(v) == 1}


def _headline_tables(c: ReportContent, flags: dict[tuple[Any, ...], Any]) -> list[str]:
    o = c.options
    fig = c.figures
    assert fig is not None
    lookup = {(r.portfolio, r.method, round(float(r.confidence), 10), int(r.horizon_days)): r
              for r in fig.itertuples(index=False)}
    uniform = _uniform_scaling(fig)
    header = [_th("Figure")]
    for m in c.methods:
        head = m == o.headline_method
        # <wbr> lets long snake_case method names wrap at their underscores.
        label = esc(m).replace("_", "_<wbr>")
        subs = (["headline"] if head else []) + ([f"multi-day{_scaling_marker(uniform[m])}"]
                                                 if _scaling_marker(uniform.get(m)) else [])
        header.append(_th(label, cls="num headline" if head else "num", sub=" · ".join(subs) or None))
    header.append(_th("Max / min", cls="num", sub="across methods"))
    out = []
    for p in c.portfolios:
        rows = []
        for metric in ("var", "es"):
            for i, (conf, h) in enumerate((cf, hz) for cf in c.confidences for hz in c.horizons):
                cells = [f'<th scope="row">{_METRIC[metric]} {fmt_confidence(conf)} <span class="hz">{h}-day</span>'
                         "</th>"]
                for m in c.methods:
                    r = lookup.get((p, m, round(conf, 10), h))
                    key = dict(portfolio=p, method=m, metric=metric, confidence=repr(conf), horizon=h)
                    cls = "headline" if m == o.headline_method else None
                    value = getattr(r, metric) if r is not None else None
                    if not is_number(value):
                        cells.append(_td(NA, cls=" ".join(filter(None, ["na", cls])), **key))
                        continue
                    marker = "" if m in uniform else _scaling_marker(r.scaling)
                    text = f'<span class="v">{fmt_amount(value, o.decimals)}</span>{marker}'
                    cells.append(_td(text, cls=" ".join(filter(None, ["num", cls])), value=data_value(value), **key))
                cells.append(_ratio_cell(flags.get((p, metric, round(conf, 10), h))))
                group = ' class="group"' if i == 0 and metric != "var" else ""
                rows.append(f"<tr{group}>{''.join(cells)}</tr>")
        caption = (f'<span class="vh">{esc(p)}: </span>VaR and ES by method <span class="sub">(positive '
                   f"numbers are losses in {esc(o.base_currency)})</span>")
        out.append(f"<h3>{esc(p)}</h3>" + table(caption, header, rows, cls="headline-table"))
    return out


def _ratio_cell(flag: Any) -> str:
    if flag is None:
        return _td(NA, cls="na")
    if is_number(flag.ratio):
        text = f"{float(flag.ratio):.2f}×"
    else:
        text = esc(flag.note or NA)
    if flag.flagged:
        return _td(f'<span class="flag">{text} – flagged</span>', cls="num")
    return _td(text, cls="num")


def _basis_table(c: ReportContent) -> str:
    fig = c.figures
    assert fig is not None
    rank = {m: i for i, m in enumerate(c.methods)}
    grouped = fig.assign(scaling=fig["scaling"].fillna(NA).astype(str)).groupby(["method", "horizon_days"])
    basis = grouped.agg(scaling=("scaling", lambda s: ", ".join(sorted(set(s)))), n_min=("n_obs", "min"),
                        n_max=("n_obs", "max")).reset_index()
    basis = basis.sort_values(["method", "horizon_days"], key=lambda s: s.map(rank) if s.name == "method" else s)
    rows = []
    for r in basis.itertuples(index=False):
        if not is_number(r.n_min):
            n = NA
        else:
            n = f"{int(r.n_min)}" if r.n_min == r.n_max else f"{int(r.n_min)}–{int(r.n_max)}"
        marker = _scaling_marker(r.scaling) if r.scaling in _SCALING else ""
        rows.append(f'<tr><th scope="row">{esc(r.method)}</th>{_td(f"{int(r.horizon_days)}-day")}'
                    f"{_td(esc(r.scaling) + marker)}{_td(n, cls='num')}</tr>")
    header = [_th("Method"), _th("Horizon"), _th("How the horizon was obtained"), _th("Observations", cls="num")]
    return table("Basis of the figures", header, rows, cls="basis")


def _flag_lookup(c: ReportContent) -> dict[tuple[Any, ...], Any]:
    if c.disagreement is None:
        return {}
    return {(r.portfolio, r.metric, round(float(r.confidence), 10), int(r.horizon_days)): r
            for r in c.disagreement.itertuples(index=False)}


def _headline_section(c: ReportContent) -> str:
    if c.figures is None or c.figures.empty:
        return _unavailable("headline", "VaR and ES", c.figures, "Risk figures",
                            _notice(f"No risk figures for {c.as_of.isoformat()} in the database."))
    intro = ("<p>Value at risk (VaR) is the loss the portfolio should not exceed with the stated confidence over "
             "the horizon; expected shortfall (ES) is the average loss in the cases beyond VaR. Methods sit side by "
             "side; the last column divides the largest figure by the smallest. Markers (√t, sim, ovl) say how a "
             "multi-day horizon was obtained: under the method's name when it holds for all its multi-day figures, "
             "else after the figure (see the basis table below).</p>")
    if c.options.headline_method not in c.methods:
        intro += _notice(f"The headline method {esc(c.options.headline_method)} has no figures for "
                         f"{c.as_of.isoformat()}; limits that name no method cannot be checked.")
    body = intro + "".join(_headline_tables(c, _flag_lookup(c))) + _basis_table(c)
    return _section("headline", "VaR and ES", body)


def _disagreement_section(c: ReportContent) -> str:
    title = "Model disagreement"
    ratio = c.options.disagreement_ratio
    if c.disagreement is None:
        return _section("disagreement", title, _notice(f"Risk figures {NOT_COMPUTED}."))
    flagged = c.disagreement[c.disagreement["flagged"]]
    if c.disagreement.empty:
        return _section("disagreement", title, _notice("Fewer than two methods per figure: nothing to compare."))
    if flagged.empty:
        return _section("disagreement", title, f"<p>No figure differs across methods by more than a factor of "
                                               f"{ratio:g} ({len(c.disagreement)} figures compared).</p>")
    rows = []
    for r in flagged.itertuples(index=False):
        ratio_text = f"{float(r.ratio):.2f}×" if is_number(r.ratio) else esc(r.note)
        ratio_html = f'<span class="flag">{ratio_text}</span>'
        rows.append(
            f'<tr><th scope="row">{esc(r.portfolio)}</th>{_td(_METRIC[r.metric])}{_td(fmt_confidence(r.confidence))}'
            f"{_td(f'{int(r.horizon_days)}-day')}{_td(esc(r.max_method))}{_num(r.max_value, c.options.decimals)}"
            f"{_td(esc(r.min_method))}{_num(r.min_value, c.options.decimals)}"
            f"{_td(ratio_html, cls='num')}</tr>"
        )
    header = [_th(h) for h in ("Portfolio", "Measure", "Confidence", "Horizon", "Highest method")] + [
        _th("Highest", cls="num"), _th("Lowest method"), _th("Lowest", cls="num"), _th("Max / min", cls="num")]
    text = (f"<p><strong>{len(flagged)} of {len(c.disagreement)} figures</strong> differ across methods by more "
            f"than a factor of {ratio:g}. Wide disagreement means the figure depends on modelling choices "
            "(distribution, weighting of recent data, volatility model): read it as a range, not a point.</p>")
    return _section("disagreement", title, text + table(
        f"Flagged figures <span class=\"sub\">(amounts in {esc(c.options.base_currency)})</span>", header, rows))


def _zone(value: object) -> str:
    if not isinstance(value, str) or not value:
        return NA
    cls = {"green": "zone-green", "yellow": "zone-yellow", "red": "zone-red"}.get(value.lower(), "zone-unknown")
    return _tag(value, cls)


def _pcell(value: object) -> str:
    text = fmt_pvalue(value)
    if is_number(value) and float(value) < _P_REJECT:  # type: ignore[arg-type]
        text += " (reject)"
    return _td(text, cls="num")


def _backtest_section(c: ReportContent) -> str:
    title = "Backtest"
    bt = c.backtest
    if bt is None or bt.empty:
        return _unavailable("backtest", title, bt, "Backtest",
                            _notice(f"No backtest results for {c.as_of.isoformat()}."))
    text = ("<p>Each day's 1-day forecast, made with data up to the day before, against that day's P&L. An exception "
            "is a day whose loss exceeded VaR. Kupiec tests the exception rate, Christoffersen's independence test "
            "whether exceptions cluster, conditional coverage both together; “reject” marks p-values below "
            f"{_P_REJECT:g}. The traffic-light zone (green, yellow, red) and plus factor follow the Basel "
            "Committee's 1996 backtesting framework; the ES zone rests on the Acerbi–Székely Z2 statistic.</p>")
    parts = [text]
    for p, sub in bt.groupby("portfolio", sort=True):
        windows = sub[["n", "first_date", "last_date"]].astype(str).drop_duplicates()
        one = len(windows) == 1
        rows = []
        for r in sub.itertuples(index=False):
            expected = f"{float(r.expected_exceptions):.1f}" if is_number(r.expected_exceptions) else NA
            window = "" if one else (f"{_td(str(int(r.n)) if is_number(r.n) else NA, cls='num')}"
                                     f"{_td(f'{fmt_date(r.first_date)} to {fmt_date(r.last_date)}', cls='date')}")
            rows.append(
                f'<tr><th scope="row">{esc(r.method)}</th>{_td(fmt_confidence(r.confidence))}{window}'
                f"{_td(str(int(r.exceptions)) if is_number(r.exceptions) else NA, cls='num', exceptions=r.exceptions)}"
                f"{_td(expected, cls='num')}{_pcell(r.kupiec_p)}{_pcell(r.independence_p)}{_pcell(r.cc_p)}"
                f"{_td(_zone(r.zone))}"
                f"{_td(f'{float(r.plus_factor):.2f}' if is_number(r.plus_factor) else NA, cls='num')}"
                f"{_td(f'{float(r.es_z2):.2f}' if is_number(r.es_z2) else NA, cls='num')}{_td(_zone(r.es_zone))}</tr>"
            )
        header = [_th("Method"), _th("Confidence")] + ([] if one else [_th("Days", cls="num"), _th("Window")]) + [
            _th(h, cls="num")
            for h in ("Exceptions", "Expected", "Kupiec p", "Independence p", "Conditional coverage p")
        ] + [_th("Zone"), _th("Plus factor", cls="num"), _th("ES Z2", cls="num"), _th("ES zone")]
        first = sub.iloc[0]
        span = (f"{int(first.n) if is_number(first.n) else NA} days, {fmt_date(first.first_date)} to "
                f"{fmt_date(first.last_date)}") if one else "windows differ by method"
        caption = f'<span class="vh">Backtest of </span>{esc(p)} <span class="sub">({span})</span>'
        parts.append(table(caption, header, rows, cls="backtest"))
    return _section("backtest", title, "".join(parts))


def _contributors_section(c: ReportContent) -> str:
    title = "Top contributors"
    v = c.contributors
    if v is None:
        why = f"Risk decomposition {NOT_COMPUTED}." if not c.contributions_present else \
            f"No risk contributions for {c.as_of.isoformat()}."
        return _section("contributors", title, _notice(why))
    d = c.options.decimals
    parts = [f"<p>Positions ranked by the size of their component VaR ({esc(v.method)}, "
             f"{fmt_confidence(v.confidence)}, {v.horizon_days}-day). Component VaRs add up to the portfolio VaR "
             "(Euler allocation); a negative component is a position that offsets the rest. Marginal VaR is the "
             "change in VaR per unit of extra exposure; incremental VaR the change if the position were removed.</p>"]
    if v.note:
        parts.append(_notice(esc(v.note[0].upper() + v.note[1:]) + "."))
    totals = v.totals.set_index("portfolio")
    header = [_th("Rank", cls="num"), _th("Instrument")] + [_th(h, cls="num") for h in (
        "Position value", "Component VaR", "Share of VaR", "Marginal VaR", "Incremental VaR", "Stand-alone VaR")]
    for p, sub in v.rows.groupby("portfolio", sort=True):
        t = totals.loc[p]
        rows = []
        for rank, r in enumerate(sub.itertuples(index=False), start=1):
            rows.append(
                f"<tr>{_td(str(rank), cls='num')}<th scope=\"row\">{esc(r.instrument)}</th>"
                f"{_num(r.position_value, d)}{_num(r.component_var, d, portfolio=p, instrument=r.instrument)}"
                f"{_td(fmt_percent(r.share), cls='num')}{_num(r.marginal_var, 4)}{_num(r.incremental_var, d)}"
                f"{_num(r.standalone_var, d)}</tr>"
            )
        benefit = (f"; diversification benefit {fmt_amount(t.diversification_benefit, d)}"
                   if is_number(t.diversification_benefit) else "")
        caption = (f"{esc(p)} <span class=\"sub\">top {len(sub)} of {int(t.n_positions)} positions; VaR "
                   f"{fmt_amount(t.total_component, d)} {esc(c.options.base_currency)}{benefit}</span>")
        parts.append(table(caption, header, rows, cls="contributors"))
    return _section("contributors", title, "".join(parts))


def _severity(value: object) -> str:
    text = str(value) if isinstance(value, str) and value else "other"
    key = text.strip().lower()
    cls = {"error": "sev-error", "critical": "sev-error", "warning": "sev-warning", "warn": "sev-warning",
           "info": "sev-info"}.get(key, "sev-other")
    return _tag(text, cls)


def _quality_section(c: ReportContent) -> str:
    title = "Data quality"
    q = c.quality
    if q is None or q.empty:
        return _unavailable("quality", title, q, "Data-quality checks",
                            "<p>No data-quality findings: every check passed.</p>")
    limit = c.options.max_quality_rows
    counts = q["severity"].fillna("other").astype(str).value_counts().sort_index()
    summary = ", ".join(f"{int(n)} {esc(s)}" for s, n in counts.items())
    rows = []
    for r in q.head(limit).itertuples(index=False):
        rows.append(
            f"<tr>{_td(_severity(r.severity))}<th scope=\"row\">{esc(r.file)}</th>{_td(esc(r.instrument))}"
            f"{_td(esc(r.check))}{_td(fmt_date(r.first_date), cls='date')}{_td(fmt_date(r.last_date), cls='date')}"
            f"{_td(str(int(r.n)) if is_number(r.n) else NA, cls='num')}"
            f"{_td(esc(r.detail) if isinstance(r.detail, str) else '')}</tr>"
        )
    header = [_th(h) for h in ("Severity", "File", "Instrument", "Check", "From", "To")] + [
        _th("Count", cls="num"), _th("Detail")]
    text = (f"<p>{len(q)} findings from ingest ({summary}). Gaps and stale prices are reported, never filled in "
            "silently; figures resting on the affected instruments deserve a second look.</p>")
    more = f"<p>{len(q) - limit} further findings not listed.</p>" if len(q) > limit else ""
    return _section("quality", title, text + table("Data-quality findings", header, rows, cls="quality") + more)


def _chart(ch: Chart) -> str:
    if ch.svg is None:
        return f'<h3>{esc(ch.title)}</h3>{_notice(esc(ch.missing))}'
    uri = "data:image/svg+xml;base64," + base64.b64encode(ch.svg.encode("utf-8")).decode("ascii")
    return (f'<figure id="{esc(ch.key)}"><h3>{esc(ch.title)}</h3><img src="{uri}" alt="{esc(ch.alt)}">'
            f"<figcaption>{esc(ch.caption)}</figcaption></figure>")


def _charts_section(c: ReportContent) -> str:
    note = ""
    if len(c.portfolios) > c.options.max_chart_portfolios:
        note = (f"<p>Charts show the first {c.options.max_chart_portfolios} of {len(c.portfolios)} portfolios in "
                "name order; the tables above cover all of them.</p>")
    return _section("charts", "Charts", note + "".join(_chart(ch) for ch in c.charts))


def _cautions_section(c: ReportContent) -> str:
    items = [
        ("Model risk.", "Every figure here is the output of a model fitted to a finite sample of past prices. "
         "Methods that are all reasonable can disagree widely (see Model disagreement); none is the true risk."),
        ("Fat tails.", "Market returns have heavier tails than the normal distribution. VaR says nothing about how "
         "large a loss beyond it can be; ES averages those losses but only over what the sample contains. The worst "
         "day in the window is not the worst possible day."),
        ("Square-root-of-time scaling.", "Multi-day figures marked √t are 1-day figures multiplied by the square "
         "root of the horizon. This assumes independent, identically distributed daily returns, no drift and "
         "positions held constant over the horizon. Under volatility clustering or autocorrelation it understates "
         "risk, and it ignores that a book may not be unwound within the horizon."),
        ("Backtests have little power.", "With about 250 days, a poor model can stay in the green zone and a good "
         "one can fall into yellow by chance; read the zone together with the tests and the chart."),
        ("Data.", "Figures are only as good as the prices and positions behind them; see Data quality."),
        ("Not investment advice.", "This report describes risk measured by models. It is not investment advice and "
         "not a recommendation to trade."),
        ("Policy first.", "The firm's risk policy and the rules of its regulator take precedence over anything in "
         "this report; limits, escalation and capital follow them, not this page."),
    ]
    body = "".join(f"<li><strong>{esc(h)}</strong> {esc(t)}</li>" for h, t in items)
    return _section("cautions", "Cautions", f'<ul class="cautions">{body}</ul>')


def _footer(c: ReportContent) -> str:
    facts = [("As of", c.as_of.isoformat()), ("Run id", ", ".join(c.run_ids) or NA)]
    prov = c.provenance
    if "recorded_at" in prov:
        facts.append(("Run recorded at", prov["recorded_at"]))
    facts.append(("Code version", prov.get("code_version", NA)))
    if "recorded_code_version" in prov:
        facts.append(("Recorded with the run", prov["recorded_code_version"]))
    facts.append(("Report built by", f"tailtrace {__version__}"))
    facts.append(("Database", c.db_name))
    body = "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in facts)
    return f'<footer><dl>{body}</dl></footer>'


def render_html(content: ReportContent) -> str:
    """Render the report page.

    Parameters
    ----------
    content : ReportContent

    Returns
    -------
    str
        A complete HTML5 document with no external resources and no script.

    Notes
    -----
    Section order: limits (breaches first), VaR and ES by method, model
    disagreement, backtest, top contributors, data quality, charts, cautions.
    Every status (breach, zone, severity) is written in words as well as
    tinted, so it survives grey-scale printing and colour blindness.

    References
    ----------
    Basel Committee on Banking Supervision (1996), *Supervisory framework for
    the use of "backtesting" in conjunction with the internal models approach
    to market risk capital requirements* (traffic-light zones, plus factors).
    Kupiec (1995) and Christoffersen (1998), International Economic Review
    39(4) (coverage and independence tests); Acerbi & Székely (2014),
    "Backtesting Expected Shortfall", Risk (Z2). The report only displays
    these statistics; they are computed by the backtest stage.
    """
    c = content
    title = f"{c.options.title} – {c.as_of.isoformat()}"
    body = "".join([
        _header(c), "<main>", _limits_section(c), _headline_section(c), _disagreement_section(c),
        _backtest_section(c), _contributors_section(c), _quality_section(c), _charts_section(c),
        _cautions_section(c), "</main>", _footer(c),
    ])
    return (
        "<!DOCTYPE html>\n"
        f'<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{esc(_CSP)}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f'<meta name="generator" content="tailtrace {esc(__version__)}">'
        f"<title>{esc(title)}</title><style>{CSS}</style></head>"
        f"<body>{body}</body></html>\n"
    )

