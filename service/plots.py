"""Plots of the monitoring views, drawn with matplotlib (object API: no pyplot, no global
figure state, safe in the server's worker threads).

Every function takes the JSON-ready body of a view (the same dict the API returns, so a plot
never disagrees with the numbers) and returns a :class:`matplotlib.figure.Figure`;
:func:`render` turns it into SVG (text kept as text, so labels are searchable) or PNG bytes.

* :func:`reliability_figure` - observed event rate against predicted risk per risk group,
  Wilson intervals, the flexible (loess) curve, the line of perfect calibration, and the
  records per group underneath;
* :func:`drift_figure` - O/E and calibration-in-the-large per window with intervals and
  tolerance bands, alert markers, and the two CUSUM charts with their control limits;
* :func:`psi_figure` - PSI per feature with the 0.10 / 0.25 bands and the counts.

Look: white ground, slate ink, one teal accent for estimates, one brick red for alerts,
light horizontal grid only, no top/right spines; sizes in inches at 100 dpi.

Robustness: every text is drawn literally (``text.parse_math`` off in :data:`STYLE`, which
every figure is built and rendered under), so a feature name, level or model name holding
``$...$`` or a backslash is shown as typed, never parsed as math. Error bars are drawn from
lengths clipped at 0, and a measure reported as ``None`` (not estimable) is left out of a
panel or shown as a dash, so any valid report body can be drawn.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from typing import Any, Literal

from matplotlib import rc_context
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, MaxNLocator
from matplotlib.typing import RcKeyType

__all__ = ["PlotFormat", "drift_figure", "psi_figure", "reliability_figure", "render"]

PlotFormat = Literal["svg", "png"]
INK, ACCENT, ALERT, MUTED, BAND = "#23303d", "#12808c", "#b9472f", "#8a96a3", "#e7f1f2"
STYLE: dict[RcKeyType, Any] = {
    "font.family": "DejaVu Sans",
    "font.size": 9,
    "axes.edgecolor": MUTED,
    "axes.labelcolor": INK,
    "axes.titlesize": 10,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": INK,
    "ytick.color": INK,
    "svg.fonttype": "none",
    "svg.hashsalt": "riskfit",
    "text.parse_math": False,  # user text ($, backslashes) drawn as typed; see module docstring
}
PERCENT = FuncFormatter(lambda v, _pos: f"{100 * v:.3g}%")


def render(fig: Figure, fmt: PlotFormat) -> bytes:
    """SVG or PNG bytes of ``fig``."""
    buf = io.BytesIO()
    with rc_context(STYLE):
        fig.savefig(buf, format=fmt, dpi=110, bbox_inches="tight", metadata=_metadata(fmt))
    return buf.getvalue()


def _metadata(fmt: PlotFormat) -> dict[str, Any]:
    return {"Date": None} if fmt == "svg" else {"Software": "riskfit"}


def _figure(width: float, height: float) -> Figure:
    with rc_context(STYLE):
        return Figure(figsize=(width, height), layout="constrained")


def _grid(ax: Axes) -> None:
    ax.grid(axis="y", color="#dfe4e8", linewidth=0.7)
    ax.set_axisbelow(True)


def _fmt(value: float | None, spec: str) -> str:
    """``value`` formatted with ``spec``, or an en dash when the report has none (``None``)."""
    return "–" if value is None else format(value, spec)


def _lengths(est: float, lower: float | None, upper: float | None) -> tuple[float, float]:
    """Error-bar lengths below and above ``est``, clipped at 0 (0 where a limit is ``None``)."""
    below = 0.0 if lower is None else max(est - lower, 0.0)
    above = 0.0 if upper is None else max(upper - est, 0.0)
    return below, above


def _message(fig: Figure, text: str) -> Figure:
    ax = fig.add_subplot()
    ax.set_axis_off()
    ax.text(0.5, 0.5, text, ha="center", va="center", color=INK, wrap=True)
    return fig


def reliability_figure(report: dict[str, Any]) -> Figure:
    """Reliability diagram of a calibration report body (see module docstring)."""
    with rc_context(STYLE):
        fig = _figure(6.2, 5.0)
        c = report["counts"]
        if report.get("status") != "ok":
            return _message(
                fig,
                f"Not enough outcomes yet: {c['n']} records, {c['events']} events in this window.",
            )
        top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=(4, 1))
        groups = report["reliability"]["groups"]
        x = [g["mean_predicted"] for g in groups]
        obs = [g["observed_rate"] for g in groups]
        bars = [_lengths(o, g["ci_lower"], g["ci_upper"]) for o, g in zip(obs, groups, strict=True)]
        err = [[b[0] for b in bars], [b[1] for b in bars]]
        curve = report["flexible_curve"]
        pts = [
            (a, b)
            for a, b in zip(curve["predicted"], curve["observed"], strict=True)
            if a is not None and b is not None
        ]
        tops = [g["ci_upper"] for g in groups if g["ci_upper"] is not None]
        hi = max([*tops, *obs, *(g["p_max"] for g in groups)]) * 1.08
        hi = min(max(hi, 0.01), 1.0)
        top.fill_between([0, hi], [0, hi], color=BAND, linewidth=0)
        top.plot(
            [0, hi], [0, hi], linestyle="--", color=MUTED, linewidth=1, label="perfect calibration"
        )
        if pts:
            top.plot(
                *zip(*pts, strict=True), color=ACCENT, linewidth=2, label="flexible curve (loess)"
            )
        level = round(100 * report["reliability"]["confidence_level"])
        top.errorbar(
            x,
            obs,
            yerr=err,
            fmt="o",
            color=INK,
            markersize=4.5,
            capsize=2.5,
            linewidth=1,
            label=f"risk group, {level}% Wilson interval",
        )
        top.set(xlim=(0, hi), ylim=(0, hi), ylabel="Observed event rate (%)")
        top.yaxis.set_major_formatter(PERCENT)
        top.set_title(
            f"Reliability of {report['model']} — {c['n']:,} outcomes, {c['events']:,} events"
        )
        top.legend(loc="upper left", frameon=False, fontsize=8)
        m = report["measures"]
        note = (
            f"calibration-in-the-large {_fmt(m['calibration_in_the_large']['estimate'], '+.3f')}\n"
            f"calibration slope {_fmt(m['calibration_slope']['estimate'], '.3f')}\n"
            f"ICI {_fmt(m['flexible_calibration']['ici'], '.4f')}   "
            f"O/E {_fmt(m['observed_expected']['ratio'], '.3f')}"
        )
        top.text(
            0.98,
            0.03,
            note,
            transform=top.transAxes,
            ha="right",
            va="bottom",
            fontsize=8,
            color=INK,
            family="DejaVu Sans Mono",
        )
        _grid(top)
        widths = [max(g["p_max"] - g["p_min"], hi / 150) for g in groups]
        bottom.bar(
            [g["p_min"] for g in groups],
            [g["n_obs"] for g in groups],
            width=widths,
            align="edge",
            color=MUTED,
            edgecolor="white",
            linewidth=0.5,
        )
        bottom.set(xlabel="Predicted risk (%)", ylabel="Records")
        bottom.xaxis.set_major_formatter(PERCENT)
        _grid(bottom)
        return fig


def _interval_panel(
    ax: Axes,
    items: Sequence[dict[str, Any]],
    measure: str,
    value_key: str,
    band: tuple[float, float],
    ideal: float,
    marked: set[str],
) -> None:
    ok = [w for w in items if w["status"] == "ok" and w[measure][value_key] is not None]
    xs = [w["index"] for w in ok]
    vals = [w[measure][value_key] for w in ok]
    bars = [
        _lengths(v, w[measure]["ci_lower"], w[measure]["ci_upper"])
        for v, w in zip(vals, ok, strict=True)
    ]
    lo, up = [b[0] for b in bars], [b[1] for b in bars]
    ax.axhspan(*band, color=BAND, linewidth=0, label="tolerance")
    ax.axhline(ideal, color=MUTED, linestyle="--", linewidth=1)
    ax.errorbar(
        xs,
        vals,
        yerr=[lo, up],
        fmt="o-",
        color=ACCENT,
        markersize=3.5,
        linewidth=1.2,
        capsize=2,
        label="estimate and interval",
    )
    hits = [(w["index"], v) for w, v in zip(ok, vals, strict=True) if w["start"] in marked]
    if hits:
        ax.plot(
            *zip(*hits, strict=True),
            linestyle="none",
            marker="v",
            markersize=8,
            color=ALERT,
            label="alert",
        )
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    if xs and max(xs) - min(xs) < 2:  # one or two windows: a tick at each, none between
        ax.set_xticks(sorted(set(xs)))
        ax.set_xlim(min(xs) - 0.5, max(xs) + 0.5)
    _grid(ax)


def drift_figure(drift: dict[str, Any], settings: dict[str, Any]) -> Figure:
    """Measures over time and the CUSUM charts of a drift view body."""
    with rc_context(STYLE):
        fig = _figure(7.0, 7.2)
        items = drift["windows"]["items"]
        if not any(w["status"] == "ok" for w in items):
            return _message(
                fig, f"Not enough outcomes in any window yet ({drift['counts']['n']} records)."
            )
        oe_ax, citl_ax, cusum_ax = fig.subplots(3, 1)
        conds = drift["alerts"]["conditions"]

        def marked(measure: str) -> set[str]:
            return {c["window"].get("start") for c in conds if c["measure"] == measure}

        _interval_panel(
            oe_ax,
            items,
            "observed_expected",
            "ratio",
            (settings["alert_oe_low"], settings["alert_oe_high"]),
            1.0,
            marked("observed_expected"),
        )
        unit = drift["windows"]["unit"]
        oe_ax.set(
            ylabel="Observed / expected events",
            xlabel=f"Window ({drift['windows']['size']} {unit} each)",
        )
        oe_ax.set_title(f"Calibration over time — {drift['model']}")
        oe_ax.legend(loc="upper left", frameon=False, fontsize=8, ncols=3)
        tol = settings["alert_citl_tolerance"]
        _interval_panel(
            citl_ax,
            items,
            "calibration_in_the_large",
            "estimate",
            (-tol, tol),
            0.0,
            marked("calibration_in_the_large"),
        )
        citl_ax.set(
            ylabel="Calibration-in-the-large (logit)",
            xlabel=f"Window ({drift['windows']['size']} {unit} each)",
        )
        _cusum_panel(cusum_ax, drift["cusum"])
        return fig


def _cusum_panel(ax: Axes, c: dict[str, Any]) -> None:
    if c.get("status") != "ok":
        ax.set_axis_off()
        ax.text(0.5, 0.5, "CUSUM: not enough outcomes since the last reset", ha="center")
        return
    for side, colour, sign in (("up", INK, 1), ("down", MUTED, -1)):
        chart = c[side]
        xs, ys = chart["path"]["index"], [sign * v for v in chart["path"]["value"]]
        ax.plot(
            xs, ys, color=colour, linewidth=1, label=f"{side}: odds ratio {chart['odds_ratio']:g}"
        )
        ax.axhline(sign * chart["h"], color=colour, linestyle=":", linewidth=1)
        if chart["signals"]:
            ax.plot(
                chart["signals"],
                [sign * v for v in chart["signal_values"]],
                linestyle="none",
                marker="v" if sign > 0 else "^",
                color=ALERT,
                markersize=7,
            )
    ax.axhline(0, color=MUTED, linewidth=0.6)
    ax.set(
        xlabel=f"Outcomes of version {c['version']} since reset (records)",
        ylabel="CUSUM S (log-likelihood ratio)",
    )
    ax.set_title(
        f"Risk-adjusted CUSUM, limits for in-control ARL {c['target_arl']:g} "
        "(dotted); downward chart drawn below 0",
        fontsize=9,
        fontweight="normal",
    )
    ax.legend(loc="upper left", frameon=False, fontsize=8, ncols=2)
    _grid(ax)


def psi_figure(drift: dict[str, Any]) -> Figure:
    """PSI per feature of a drift view body, banded at 0.10 and 0.25."""
    with rc_context(STYLE):
        d = drift["input_drift"]
        feats = [f for f in d["features"] if f["status"] == "ok"]
        fig = _figure(6.2, 0.9 + 0.45 * max(len(feats), 1))
        if not feats:
            return _message(fig, "No recent inputs to compare with the reference yet.")
        ax = fig.add_subplot()
        t = d["thresholds"]
        vals = [f["psi"] or 0.0 for f in feats]
        colours = [
            ACCENT if v < t["moderate"] else "#d39b2a" if v < t["major"] else ALERT for v in vals
        ]
        ys = range(len(feats))
        ax.barh(list(ys), vals, color=colours, height=0.6)
        ax.set_yticks(list(ys), [f["feature"] for f in feats])
        ax.invert_yaxis()
        for y, v, f in zip(ys, vals, feats, strict=True):
            ax.text(v, y, f"  {v:.3f}  (n={f['n_obs']:,})", va="center", fontsize=8, color=INK)
        for x, style, name in (
            (t["moderate"], "--", "moderate shift (0.10)"),
            (t["major"], ":", "major shift (0.25)"),
        ):
            ax.axvline(x, color=MUTED, linestyle=style, linewidth=1, label=name)
        ax.legend(loc="lower right", frameon=False, fontsize=8)
        ax.set_xlim(0, max([*vals, t["major"]]) * 1.35)
        ax.set(xlabel="Population stability index (unitless)")
        ax.set_title(f"Input drift against version {d['version']}'s training reference")
        ax.grid(axis="x", color="#dfe4e8", linewidth=0.7)
        ax.set_axisbelow(True)
        return fig
