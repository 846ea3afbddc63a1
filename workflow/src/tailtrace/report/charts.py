"""Charts of the report, drawn with matplotlib (Agg canvas) as SVG text.

matplotlib is imported here only, and only when a chart is drawn, so the
rest of the package does not pay for it. Figures are built without pyplot
(no global state) and saved with a fixed hash salt and no date, so the same
data gives the same bytes.
"""

from __future__ import annotations

import io
from typing import Any, Callable, Sequence

import numpy as np
import pandas as pd

__all__ = [
    "pnl_distribution_chart",
    "backtest_chart",
    "var_by_method_chart",
    "contributions_chart",
]

INK = "#1f2933"
MUTED = "#8a96a3"
LIGHT = "#c9d1d9"
ACCENT = "#2f5d7c"
SECOND = "#9c5a1c"
ALERT = "#a31d1d"
_RC = {
    "svg.hashsalt": "tailtrace-report",
    "svg.fonttype": "none",  # real text: smaller, faster, selectable
    "text.parse_math": False,  # names with "$" must print as written
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans", "Arial", "Helvetica"],
    "font.size": 8.5,
    "axes.edgecolor": MUTED,
    "axes.labelcolor": INK,
    "axes.titlesize": 9.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#e4e8ec",
    "grid.linewidth": 0.6,
    "xtick.color": INK,
    "ytick.color": INK,
    "legend.frameon": False,
    "legend.fontsize": 8,
    "legend.scatterpoints": 1,
    "axes.axisbelow": True,
    "figure.dpi": 100,
}
_WIDTH = 8.0
_PANEL = 2.4


def _short_amount(value: float, _pos: object = None) -> str:
    """Axis label of an amount: 1,234 / 12.3k / 4.5m / 1.2bn."""
    size = abs(value)
    for scale, suffix in ((1e9, "bn"), (1e6, "m"), (1e3, "k")):
        if size >= scale:
            return f"{value / scale:,.3g}{suffix}"
    return f"{value:,.0f}" if size >= 1 or value == 0 else f"{value:.2g}"


def _draw(n_panels: int, draw: Callable[[Any, int], None], *, height: float = _PANEL, legend: bool = True) -> str:
    """Draw ``n_panels`` stacked axes with ``draw(ax, i)``; one legend on top.

    Panels whose legend differs (values in the labels) draw their own and
    pass ``legend=False``.
    """
    from matplotlib import rc_context
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter

    with rc_context(_RC):
        fig = Figure(figsize=(_WIDTH, 0.8 + height * n_panels))
        FigureCanvasAgg(fig)
        axes = fig.subplots(n_panels, 1, squeeze=False)[:, 0]
        entries: dict[str, Any] = {}
        for i, ax in enumerate(axes):
            draw(ax, i)
            for axis in (ax.xaxis, ax.yaxis):
                if getattr(axis, "_tailtrace_amount", False):
                    axis.set_major_formatter(FuncFormatter(_short_amount))
            handles, labels = ax.get_legend_handles_labels()
            for handle, label in zip(handles, labels):
                entries.setdefault(label, handle)
        legend_rows = -(-len(entries) // 5) if legend and entries else 0
        _fixed_layout(fig, axes, legend_rows)
        if legend_rows:
            fig.legend(list(entries.values()), list(entries), loc="upper center", ncols=min(5, len(entries)),
                       bbox_to_anchor=(0.5, 1.0))
        buf = io.StringIO()
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    return buf.getvalue()


def _tick_labels(axis: Any) -> list[str]:
    """The major tick labels the axis will draw."""
    locs = [v for v in axis.get_major_locator()() if np.isfinite(v)]
    formatter = axis.get_major_formatter()
    formatter.set_locs(locs)
    return [str(formatter(v, i)) for i, v in enumerate(locs)]


def _fixed_layout(fig: Any, axes: Sequence[Any], legend_rows: int) -> None:
    """Margins from the text the panels hold, in inches.

    matplotlib's constrained layout measures every text of every panel
    twice per chart (a third of the report's time); here only the distinct
    y tick labels are measured, once, and the rest of the margins are fixed.
    """
    from matplotlib.font_manager import FontProperties

    width, height = fig.get_size_inches()
    renderer = fig.canvas.get_renderer()
    font = FontProperties(size=_RC["font.size"])
    labels = {label for ax in axes for label in _tick_labels(ax.yaxis)} or {"0"}
    widest = max(renderer.get_text_width_height_descent(label, font, ismath=False)[0] for label in labels)
    left = 0.2 + widest / fig.dpi
    left += 0.22 if any(ax.get_ylabel() for ax in axes) else 0.0
    bottom = 0.3 + (0.22 if any(ax.get_xlabel() for ax in axes) else 0.0)
    top = 0.32 + 0.24 * legend_rows
    gap = 0.32 + bottom  # the next panel's title below this one's tick labels and axis label
    n = len(axes)
    axes_height = max((height - top - bottom - gap * (n - 1)) / n, 0.5)
    fig.subplots_adjust(left=min(left / width, 0.6), right=1.0 - 0.2 / width, bottom=bottom / height,
                        top=1.0 - top / height, hspace=gap / axes_height)


def _amount_axis(axis: Any) -> None:
    axis._tailtrace_amount = True


def pnl_distribution_chart(
    pnl: pd.DataFrame, marks: pd.DataFrame, *, portfolios: Sequence[str], currency: str, label: str
) -> str:
    """Histogram of each portfolio's scenario P&L with VaR and ES marked.

    Parameters
    ----------
    pnl : pandas.DataFrame
        Columns ``portfolio, pnl`` (1-day scenario P&L).
    marks : pandas.DataFrame
        Columns ``portfolio, var, es`` (positive losses) to mark at -VaR and
        -ES; portfolios missing here are drawn unmarked.
    portfolios : sequence of str
        Panels, in order.
    currency : str
    label : str
        What the marks are (method, confidence), for the legend.

    Returns
    -------
    str
        SVG document.
    """
    marks = marks.set_index("portfolio")

    def draw(ax: Any, i: int) -> None:
        name = portfolios[i]
        values = pnl.loc[pnl["portfolio"] == name, "pnl"].to_numpy(float)
        values = values[np.isfinite(values)]
        counts, edges = np.histogram(values, bins=min(60, max(10, values.size // 8)))
        var = float(marks.at[name, "var"]) if name in marks.index else np.nan
        es = float(marks.at[name, "es"]) if name in marks.index else np.nan
        tail = edges[1:] <= -var if np.isfinite(var) else np.zeros(counts.size, bool)
        # one outline per part instead of a patch per bin: the same picture, drawn many times faster
        ax.stairs(np.where(tail, 0, counts), edges, fill=True, color=LIGHT, label="scenarios")
        if tail.any():
            ax.stairs(np.where(tail, counts, 0), edges, fill=True, facecolor=MUTED, edgecolor="white", hatch="////",
                      label="losses beyond VaR")
        if np.isfinite(var):
            ax.axvline(-var, color=ACCENT, linewidth=1.6, label=f"VaR {_short_amount(var)}")
        if np.isfinite(es):
            ax.axvline(-es, color=SECOND, linewidth=1.6, linestyle="--", label=f"ES {_short_amount(es)}")
        ax.set_title(f"{name}  ({values.size} scenarios; {label})")
        ax.set_xlabel(f"1-day P&L ({currency})")
        ax.set_ylabel("scenarios")
        _amount_axis(ax.xaxis)
        ax.legend(loc="upper left")

    return _draw(len(portfolios), draw, legend=False)


def backtest_chart(
    forecasts: pd.DataFrame, *, portfolios: Sequence[str], currency: str, label: str
) -> str:
    """Realised P&L against the rolling VaR (and ES) forecast, exceptions marked.

    Parameters
    ----------
    forecasts : pandas.DataFrame
        ``backtest_forecasts`` rows of one method and confidence: ``date,
        portfolio, var, es, pnl, exception``.
    portfolios : sequence of str
    currency : str
    label : str
        Method and confidence, for the title.

    Returns
    -------
    str
        SVG document.
    """
    import matplotlib.dates as mdates

    def draw(ax: Any, i: int) -> None:
        name = portfolios[i]
        rows = forecasts[forecasts["portfolio"] == name].sort_values("date")
        dates = pd.to_datetime(rows["date"]).to_numpy()
        pnl = rows["pnl"].to_numpy(float)
        exc = rows["exception"].to_numpy(dtype=bool, na_value=False)
        # One line collection instead of a patch per day: much faster to draw and smaller SVG.
        ax.vlines(dates, 0.0, pnl, color=LIGHT, linewidth=1.2, label="realised P&L")
        ax.plot(dates, -rows["var"].to_numpy(float), color=ACCENT, linewidth=1.3, label="-VaR forecast")
        es = rows["es"].to_numpy(float) if "es" in rows else np.array([])
        if es.size and np.isfinite(es).any():
            ax.plot(dates, -es, color=SECOND, linewidth=1.0, linestyle="--", label="-ES forecast")
        ax.scatter(dates[exc], pnl[exc], marker="X", s=36, color=ALERT, zorder=3, label="exception (loss beyond VaR)")
        ax.axhline(0.0, color=MUTED, linewidth=0.6)
        ax.set_title(f"{name}  ({label}): {int(exc.sum())} exceptions in {exc.size} days")
        ax.set_ylabel(f"P&L ({currency})")
        _amount_axis(ax.yaxis)
        locator = mdates.AutoDateLocator()
        ax.xaxis.set_major_locator(locator)
        ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))

    return _draw(len(portfolios), draw)


def var_by_method_chart(
    figures: pd.DataFrame, *, portfolios: Sequence[str], methods: Sequence[str], currency: str, label: str,
    headline: str,
) -> str:
    """VaR of each method side by side, with its confidence band and ES.

    Parameters
    ----------
    figures : pandas.DataFrame
        ``risk_figures`` rows of one confidence and horizon.
    portfolios, methods : sequence of str
        Panels and bars, in order.
    currency, label : str
    headline : str
        Headline method (its bar is hatched and named so in the axis).

    Returns
    -------
    str
        SVG document.
    """
    n = len(methods)

    def draw(ax: Any, i: int) -> None:
        name = portfolios[i]
        rows = figures[figures["portfolio"] == name].set_index("method").reindex(list(methods))
        y = np.arange(n)
        var = rows["var"].to_numpy(float)
        lo = rows["var_lo"].to_numpy(float) if "var_lo" in rows else np.full(n, np.nan)
        hi = rows["var_hi"].to_numpy(float) if "var_hi" in rows else np.full(n, np.nan)
        from matplotlib.patches import Rectangle

        bars = ax.barh(y, np.nan_to_num(var), color=ACCENT, height=0.6)
        for bar, method in zip(bars, methods):
            if method == headline:
                bar.set_hatch("///")
                bar.set_edgecolor("white")
        # Zero-size patches: legend entries for plain and hatched bars.
        ax.add_patch(Rectangle((0, 0), 0, 0, facecolor=ACCENT, label="VaR"))
        ax.add_patch(Rectangle((0, 0), 0, 0, facecolor=ACCENT, hatch="///", edgecolor="white",
                               label="VaR of the headline method"))
        band = np.isfinite(lo) & np.isfinite(hi)
        if band.any():
            # Drawn from its own ends: a band need not contain the point estimate.
            left, right = np.minimum(lo[band], hi[band]), np.maximum(lo[band], hi[band])
            ax.errorbar((left + right) / 2, y[band], xerr=(right - left) / 2, fmt="none", ecolor=INK,
                        elinewidth=1.0, capsize=3, label="VaR confidence band")
        ax.margins(x=0.08)
        ax.scatter(rows["es"].to_numpy(float), y, marker="D", s=22, facecolor="white", edgecolor=SECOND,
                   linewidth=1.3, zorder=3, label="ES")
        ax.set_yticks(y, [f"{m} (headline)" if m == headline else m for m in methods])
        ax.invert_yaxis()
        ax.set_title(f"{name}  ({label})")
        ax.set_xlabel(f"loss ({currency})")
        ax.set_xlim(left=0)
        _amount_axis(ax.xaxis)

    return _draw(len(portfolios), draw, height=max(1.6, 0.3 * n + 0.9))


def contributions_chart(rows: pd.DataFrame, *, portfolios: Sequence[str], currency: str, label: str) -> str:
    """Component VaR of the top contributors per portfolio.

    Parameters
    ----------
    rows : pandas.DataFrame
        ``instrument, portfolio, component_var`` of the contributors shown,
        in the order listed.
    portfolios : sequence of str
    currency, label : str

    Returns
    -------
    str
        SVG document.
    """
    longest = int(rows.groupby("portfolio").size().max()) if not rows.empty else 1

    def draw(ax: Any, i: int) -> None:
        name = portfolios[i]
        sub = rows[rows["portfolio"] == name]
        values = sub["component_var"].to_numpy(float)
        y = np.arange(values.size)
        hedge = values < 0
        ax.barh(y[~hedge], values[~hedge], color=ACCENT, height=0.6, label="adds risk")
        if hedge.any():
            ax.barh(y[hedge], values[hedge], color=MUTED, hatch="\\\\\\", edgecolor="white", height=0.6,
                    label="reduces risk (hedge)")
        ax.axvline(0.0, color=INK, linewidth=0.6)
        ax.set_yticks(y, list(sub["instrument"].astype(str)))
        ax.set_ylim(longest - 0.5, -0.5)
        ax.set_title(f"{name}  ({label})")
        ax.set_xlabel(f"component VaR ({currency})")
        _amount_axis(ax.xaxis)

    return _draw(len(portfolios), draw, height=max(1.6, 0.25 * longest + 1.0))
