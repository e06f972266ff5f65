"""Plots as SVG text, drawn with matplotlib (imported only inside these
functions, through its object API: no pyplot, no global figure state).

- ``sweep_plot``: each selected load's error (or current) against
  temperature or supply, with its budget band;
- ``spread_histogram``: Monte Carlo histograms of the worst loads with their
  budget lines;
- ``report_plots``: what the HTML report embeds.
"""

from __future__ import annotations

import io
from typing import Any, Sequence

import numpy as np

from biastree.units import ZERO_CELSIUS

MAX_LINES = 8  # a plot of more loads than this is a tangle; the worst ones are chosen


def _svg(fig: Any) -> str:
    import matplotlib

    buf = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": "biastree", "svg.fonttype": "none"}):
        fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    text = buf.getvalue()
    start = text.find("<svg")
    return text[start:] if start >= 0 else text


def _figure(width: float, height: float) -> Any:
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), dpi=100, layout="constrained")


def worst_loads(error: np.ndarray, tolerance: np.ndarray, n: int = MAX_LINES) -> list[int]:
    """Loads with the largest |error| / budget over the columns, worst first."""
    use = np.nanmax(np.abs(error), axis=1) / np.where(tolerance > 0, tolerance, np.inf)
    return [int(i) for i in np.argsort(-use, kind="stable")[:n]]


def _axis(cond: Any, axis: str) -> tuple[list[int], np.ndarray, str]:
    """Columns along one axis (the others at their first value, nominal voltage end) and the x values."""
    cols = cond.columns
    ends = [name.rsplit(" ", 1)[-1] for name in cols.names]
    end = "nominal" if "nominal" in ends else ends[0]
    other = cols.supply if axis == "temperature" else cols.temperature
    pick = [k for k in range(cols.size) if ends[k] == end and cols.corner[k] == cols.corner[0] and other[k] == other[0]]
    x = cols.temperature[pick] - ZERO_CELSIUS if axis == "temperature" else cols.supply[pick]
    order = np.argsort(x, kind="stable")
    label = "temperature (°C)" if axis == "temperature" else "supply (V)"
    return [pick[k] for k in order], x[order], label


def sweep_plot(cond: Any, loads: Sequence[int] | None = None, quantity: str = "error",
               axis: str | None = None) -> str:
    """SVG: each load's ``error`` (%) or ``current`` against ``axis`` (temperature or
    supply; default whichever varies), with its budget band.  ``cond`` is a
    ``ConditionResult``; ``loads`` default to the worst few."""
    if quantity not in ("error", "current"):
        raise ValueError("quantity must be 'error' or 'current'")
    tree = cond.tree
    cols = cond.columns
    if axis is None:
        axis = "temperature" if np.ptp(cols.temperature) > 0 or np.ptp(cols.supply) == 0 else "supply"
    target = np.array([tree.plan.loads[n].current for n in tree.loads])
    tol = np.array([tree.plan.loads[n].tolerance for n in tree.loads])
    error = cond.error
    chosen = list(loads) if loads is not None else worst_loads(error, tol)
    pick, x, xlabel = _axis(cond, axis)
    fig = _figure(7.5, 4.2)
    ax = fig.add_subplot()
    colours = [f"C{k % 10}" for k in range(len(chosen))]
    for colour, i in zip(colours, chosen):
        name = tree.loads[i]
        if quantity == "error":
            y = error[i, pick] * 100
            lo, hi = -tol[i] * 100, tol[i] * 100
        else:
            y = cond.op.l_current[i, pick] * 1e6
            lo, hi = target[i] * (1 - tol[i]) * 1e6, target[i] * (1 + tol[i]) * 1e6
        ax.plot(x, y, marker="o", markersize=3, color=colour, label=name)
        if len(chosen) <= 3 or quantity == "current":
            ax.axhspan(lo, hi, color=colour, alpha=0.08, lw=0)
        ax.axhline(lo, color=colour, lw=0.8, ls="--")
        ax.axhline(hi, color=colour, lw=0.8, ls="--")
    ax.set_xlabel(xlabel)
    ax.set_ylabel("error (%)" if quantity == "error" else "current (µA)")
    ax.set_title(f"{'error' if quantity == 'error' else 'current'} against {axis}; dashed: each load's budget",
                 fontsize=10)
    ax.grid(True, color="#eceff1")
    ax.legend(fontsize=8, loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False)
    return _svg(fig)


def spread_histogram(mc: Any, loads: Sequence[int] | None = None, bins: int = 40) -> str:
    """SVG: Monte Carlo histogram of each of the worst loads' error (%), with budget lines.
    ``mc`` is a ``MonteCarlo``."""
    tree = mc.tree
    tol = np.array([tree.plan.loads[n].tolerance for n in tree.loads])
    error = mc.error
    chosen = list(loads) if loads is not None else worst_loads(error, tol, 6)
    n = len(chosen)
    ncols = min(3, n)
    nrows = -(-n // ncols)
    fig = _figure(3.2 * ncols, 2.4 * nrows)
    axes = np.atleast_1d(fig.subplots(nrows, ncols, squeeze=False)).ravel()
    for ax, i in zip(axes, chosen):
        e = error[i] * 100
        inside = float(np.mean(np.abs(error[i]) <= tol[i]))
        ax.hist(e, bins=bins, color="#5c6bc0", alpha=0.85, histtype="stepfilled")
        for edge in (-tol[i] * 100, tol[i] * 100):
            ax.axvline(edge, color="#c0392b", lw=1.2, ls="--")
        ax.set_title(f"{tree.loads[i]}: {inside * 100:.4g}% inside ±{tol[i] * 100:.3g}%", fontsize=9)
        ax.set_xlabel("error (%)", fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in axes[n:]:
        ax.set_visible(False)
    fig.suptitle(f"Monte Carlo, {mc.samples} samples (seed {mc.seed}); dashed: budget", fontsize=10)
    return _svg(fig)


def report_plots(result: Any) -> list[tuple[str, str]]:
    """(caption, SVG) pairs for the report: the worst loads over the plan's
    temperatures and over its supplies, when it lists more than one."""
    cond = result.conditions
    if cond is None:
        return []
    out = []
    for axis in ("temperature", "supply"):
        values = cond.columns.temperature if axis == "temperature" else cond.columns.supply
        if np.unique(values).size > 1:
            out.append((f"The worst loads' error against {axis} (other conditions at their first value, "
                        "nominal voltage end); dashed lines: each load's budget.", sweep_plot(cond, axis=axis)))
    return out
