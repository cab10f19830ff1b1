"""The board's pictures: ``BoardData`` values in, plotly figures out.

Colours are the Okabe-Ito palette, chosen to stay distinct under the common forms of colour
blindness (Okabe & Ito 2008, "Color Universal Design"); the objective's colour scale is cividis
(Nuñez, Anderton & Renslow 2018, PLOS ONE 13(7): e0199239), made for the same purpose. States
differ by marker shape as well as colour, and lines by dash, so no picture relies on colour alone.
"""

from __future__ import annotations

import math

import plotly.graph_objects as go

from sweep.board.values import BoardData, GapPoints
from sweep.record import TRIAL_STATES, is_finite

__all__ = ["OKABE_ITO", "PLOT_CONFIG", "STATE_STYLE", "build_figures"]

OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "bluish_green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "reddish_purple": "#CC79A7",
}
CURVE_COLOURS = tuple(OKABE_ITO[c] for c in ("blue", "vermillion", "bluish_green", "reddish_purple",
                                              "orange", "sky_blue", "black", "yellow"))
STATE_STYLE = {  # colour and marker symbol per state
    "complete": (OKABE_ITO["blue"], "circle"),
    "pruned": (OKABE_ITO["orange"], "x"),
    "failed": (OKABE_ITO["vermillion"], "triangle-down"),
    "running": (OKABE_ITO["sky_blue"], "square"),
}
OBJECTIVE_SCALE = "Cividis"
MAX_BARS = 300  # the epochs picture draws bars up to this many trials, points beyond
PLOT_CONFIG = {"displaylogo": False, "displayModeBar": False, "responsive": True}
FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, 'Helvetica Neue', Arial, sans-serif"


def _layout(fig: go.Figure, *, x: str, y: str, height: int = 340) -> go.Figure:
    fig.update_layout(
        template="simple_white", height=height, margin=dict(l=64, r=24, t=36, b=52),
        font=dict(family=FONT, size=13, color="#222"), hovermode="closest",
        legend=dict(orientation="h", yanchor="bottom", y=1.02, xanchor="left", x=0),
    )
    fig.update_xaxes(title_text=x, showgrid=True, gridcolor="#e6e6e6")
    fig.update_yaxes(title_text=y, showgrid=True, gridcolor="#e6e6e6")
    return fig


def _quantile(values, q: float) -> float:
    """The q-quantile of values (linear interpolation between order statistics, as numpy's default)."""
    ordered = sorted(values)
    pos = q * (len(ordered) - 1)
    low = math.floor(pos)
    high = min(low + 1, len(ordered) - 1)
    return ordered[low] + (ordered[high] - ordered[low]) * (pos - low)


def _top_edge(values, keep) -> float | None:
    """Where to cut the y scale so a few far values do not flatten the rest, or None to show all.

    The scale keeps every value in ``keep`` and 85% of ``values``, plus a margin; it is cut only
    when the largest value lies beyond that by more than the range kept.
    """
    values = [v for v in values if is_finite(v)]
    if len(values) < 5:
        return None
    low = min(values)
    top = max([_quantile(values, 0.85)] + [v for v in keep if is_finite(v)])
    top += 0.08 * (top - low)
    return top if max(values) > top + (top - low) else None


def _progress(data: BoardData):
    h = data.header
    objective = h.objective
    points = [p for p in data.progress if is_finite(p.objective)]
    if not points:
        return None, "Objective by trial: not drawn, no trial has an objective yet."
    baseline = h.best_baseline
    best = [p for p in data.progress if is_finite(p.running_best)]
    top = _top_edge([p.objective for p in points],
                    [baseline.objective if baseline else None] + [p.running_best for p in best[-1:]])
    fig = go.Figure()
    n_above = 0
    for state in ("complete", "pruned"):
        chosen = [p for p in points if p.state == state]
        inside = [p for p in chosen if top is None or p.objective <= top]
        above = [p for p in chosen if top is not None and p.objective > top]
        colour, symbol = STATE_STYLE[state]
        if inside:
            fig.add_trace(go.Scatter(
                x=[p.trial for p in inside], y=[p.objective for p in inside], mode="markers", name=state,
                marker=dict(color=colour, symbol=symbol, size=7, line=dict(width=1, color=colour)),
                hovertemplate=f"trial %{{x}} ({state})<br>{objective} %{{y:.4g}}<extra></extra>"))
        if above:  # drawn on the top edge as triangles; the hover gives the value
            n_above += len(above)
            fig.add_trace(go.Scatter(
                x=[p.trial for p in above], y=[top] * len(above), customdata=[p.objective for p in above],
                mode="markers", name=f"{state}, above the scale", cliponaxis=False,
                marker=dict(color=colour, symbol="triangle-up", size=8),
                hovertemplate=f"trial %{{x}} ({state})<br>{objective} %{{customdata:.4g}} (above the scale)"
                              "<extra></extra>"))
    if best:
        fig.add_trace(go.Scatter(x=[p.trial for p in best], y=[p.running_best for p in best], mode="lines",
                                 name="best so far", line=dict(color=OKABE_ITO["bluish_green"], width=2, shape="hv"),
                                 hoverinfo="skip"))
    text = "no baseline recorded"
    if baseline is not None:
        fig.add_hline(y=baseline.objective, line=dict(color=OKABE_ITO["black"], dash="dash", width=1.5),
                      annotation_text=f"best baseline: {baseline.name}", annotation_position="top left")
        text = f"the dashed line is the best baseline ({baseline.name}); points below it beat every baseline"
    direction = "higher" if h.direction == "maximize" else "lower"
    _layout(fig, x="trial number", y=f"{objective} (validation)")
    if top is not None:
        low = min(p.objective for p in points)
        fig.update_yaxes(range=[low - 0.04 * (top - low), top])
    cut = f" {n_above} trials far above the rest sit on the top edge as triangles." if n_above else ""
    return fig, (f"Each point is one trial's {objective} on the validation window ({direction} is better; "
                 f"crosses are pruned trials); the green line is the best complete trial so far and {text}.{cut}")


def _curves(data: BoardData):
    if not data.curves:
        return None, "Learning curves: not drawn, no trial is complete yet."
    fig = go.Figure()
    for i, c in enumerate(data.curves):
        colour = CURVE_COLOURS[i % len(CURVE_COLOURS)]
        group = f"trial {c.trial}"
        fig.add_trace(go.Scatter(x=c.epoch, y=c.valid_loss, mode="lines", name=f"#{c.rank} {group}",
                                 legendgroup=group, line=dict(color=colour, width=2),
                                 hovertemplate=f"{group} validation<br>epoch %{{x}}: %{{y:.4g}}<extra></extra>"))
        fig.add_trace(go.Scatter(x=c.epoch, y=c.train_loss, mode="lines", name=f"{group} training",
                                 legendgroup=group, showlegend=False, line=dict(color=colour, width=1.5, dash="dot"),
                                 hovertemplate=f"{group} training<br>epoch %{{x}}: %{{y:.4g}}<extra></extra>"))
        if c.best_epoch in c.epoch:
            k = c.epoch.index(c.best_epoch)
            fig.add_trace(go.Scatter(x=[c.best_epoch], y=[c.valid_loss[k]], mode="markers", legendgroup=group,
                                     showlegend=False, marker=dict(color=colour, symbol="diamond", size=10,
                                                                   line=dict(width=1, color="#fff")),
                                     hovertemplate=f"{group} best epoch %{{x}}<extra></extra>"))
    values = [v for c in data.curves for v in c.valid_loss + c.train_loss]
    after_best = [v for c in data.curves for k, e in enumerate(c.epoch) if e >= c.best_epoch
                  for v in (c.valid_loss[k], c.train_loss[k])]
    top = _top_edge(values, after_best)
    _layout(fig, x="epoch", y="loss (training loss function)", height=380)
    cut = ""
    if top is not None:
        low = min(v for v in values if is_finite(v))
        fig.update_yaxes(range=[low - 0.04 * (top - low), top])
        cut = " The scale is cut at the top; the first epochs start above it."
    return fig, (f"Validation loss (solid) and training loss (dotted, same colour) per epoch of the "
                 f"{len(data.curves)} best complete trials; the diamond marks the best epoch (its weights are kept). "
                 f"Validation rising while training keeps falling is overfitting.{cut}")


def _gap(data: BoardData, name: str, label: str):
    part = data.scatter.get(name, GapPoints(reason=f"{name} is not among the trials' settings"))
    points = part.points
    if not points:
        return None, f"Overfit gap against {label}: not drawn, {part.reason}."
    objective = data.header.objective
    colours = [p.objective for p in points if is_finite(p.objective)] or [0.0]
    top = _top_edge([p.gap for p in points], [])
    above = [top is not None and p.gap > top for p in points]
    fig = go.Figure(go.Scatter(
        x=[p.x for p in points], y=[top if up else p.gap for p, up in zip(points, above)], mode="markers",
        name="complete trial", cliponaxis=False,
        customdata=[[p.trial, p.gap, p.gap_ratio if is_finite(p.gap_ratio) else None, p.objective]
                    for p in points],
        marker=dict(size=8, color=[p.objective for p in points], colorscale=OBJECTIVE_SCALE, showscale=True,
                    cmin=min(colours), cmax=_quantile(colours, 0.9) if len(colours) >= 5 else max(colours),
                    symbol=["triangle-up" if up else "circle" for up in above],
                    colorbar=dict(title=dict(text=objective), thickness=14), line=dict(width=0.5, color="#333")),
        hovertemplate=(f"trial %{{customdata[0]}}<br>{label} %{{x}}<br>gap %{{customdata[1]:.4g}} "
                       f"(ratio %{{customdata[2]:.3f}})<br>{objective} %{{customdata[3]:.4g}}<extra></extra>")))
    fig.add_hline(y=0, line=dict(color="#888", width=1))
    _layout(fig, x=label, y="overfit gap (validation - training loss)")
    if top is not None:
        low = min(0.0, min(p.gap for p in points))
        fig.update_yaxes(range=[low - 0.04 * (top - low), top])
    xs = [p.x for p in points]
    if name == "hidden_units" and min(xs) > 0 and max(xs) / min(xs) > 4:  # units read better on a log scale
        fig.update_xaxes(type="log")
    n_above = sum(above)
    cut = f" {n_above} trials with far larger gaps sit on the top edge as triangles." if n_above else ""
    return fig, (f"Each point is a complete trial: its overfit gap at the best epoch (validation minus training "
                 f"loss; above 0 it does worse on data it did not train on) against its {label}, coloured by "
                 f"{objective} (darker is lower; the worst tenth share the lightest colour).{cut}")


def _importance(data: BoardData):
    imp = data.importance
    if imp.reason is not None:
        return None, f"Setting importance: not drawn, {imp.reason}."
    names = list(imp.values)[::-1]  # largest at the top
    shares = [imp.values[n] for n in names]
    fig = go.Figure(go.Bar(x=shares, y=names, orientation="h", marker_color=OKABE_ITO["blue"],
                           text=[f"{s:.0%}" for s in shares], textposition="outside", cliponaxis=False,
                           hovertemplate="%{y}: %{x:.3f}<extra></extra>"))
    _layout(fig, x="share of importance", y="setting", height=max(220, 60 + 34 * len(names)))
    fig.update_xaxes(range=[0, max(shares) * 1.18 if shares else 1], tickformat=".0%")
    return fig, (f"How much each searched setting explains which trials reach the best {data.header.objective} "
                 f"(optuna's {imp.evaluator} on the {imp.n_trials} complete trials; shares sum to 1). "
                 "A long bar is a setting worth fixing carefully; with few trials it is a rough estimate.")


def _epochs(data: BoardData):
    e = data.epochs
    if not e.trials:
        return None, "Epochs per trial: not drawn, the study has no trial yet."
    as_bars = len(e.trials) <= MAX_BARS  # past that, bars get thinner than a pixel: draw points
    fig = go.Figure()
    for state in TRIAL_STATES:
        chosen = [t for t in e.trials if t.state == state]
        if not chosen:
            continue
        colour, symbol = STATE_STYLE[state]
        x, y = [t.trial for t in chosen], [t.epochs for t in chosen]
        hover = f"trial %{{x}} ({state}): %{{y}} epochs<extra></extra>"
        if as_bars:
            fig.add_trace(go.Bar(x=x, y=y, name=state, hovertemplate=hover,
                                 marker=dict(color=colour, pattern_shape="/" if state == "pruned" else "")))
        else:
            fig.add_trace(go.Scatter(x=x, y=y, name=state, mode="markers", hovertemplate=hover,
                                     marker=dict(color=colour, symbol=symbol, size=5)))
    fig.add_hline(y=e.max_epochs, line=dict(color=OKABE_ITO["black"], dash="dot", width=1),
                  annotation_text=f"max_epochs {e.max_epochs}", annotation_position="top left")
    _layout(fig, x="trial number", y="epochs run")
    fig.update_layout(barmode="overlay", bargap=0.1)
    if e.saved_share is None:
        saved = "no epoch was run yet"
    else:
        saved = (f"pruning saved {e.saved_share:.0%} of epochs = the {e.n_saved} epochs the "
                 f"{e.n_pruned} pruned trials would still have had up to max_epochs, divided by that plus the "
                 f"{e.n_run} epochs actually run by all trials (an upper bound: early stopping may have "
                 "ended some sooner)")
    shown = "complete (solid bars) against pruned (hatched)" if as_bars else "complete (dots) against pruned (crosses)"
    return fig, f"Epochs each trial ran, {shown}; {saved}."


def build_figures(data: BoardData) -> list[tuple[str, str, go.Figure | None]]:
    """The board's pictures in page order: (div id, one-line caption, figure or None when absent).

    An absent picture (too few trials, a setting never recorded) keeps its place with a caption that
    says why.
    """
    out = []
    for fig_id, make in (
        ("fig-progress", _progress),
        ("fig-curves", _curves),
        ("fig-gap-hidden-units", lambda d: _gap(d, "hidden_units", "hidden units")),
        ("fig-gap-dropout", lambda d: _gap(d, "dropout", "dropout rate")),
        ("fig-importance", _importance),
        ("fig-epochs", _epochs),
    ):
        fig, caption = make(data)
        out.append((fig_id, caption, fig))
    return out
