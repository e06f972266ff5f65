"""The planner's objectives and its small Pareto set, all judged by ``check_tree``.

* **area** — the power-lean plan, then every mirror's input device is made as
  small as its loads allow: halve it (ratios re-rounded to whole units) for
  all block mirrors in one check and all distribution mirrors in another,
  keep each halving under which every load below that mirror still passes,
  repeat.  Only reductions are kept, so the area plan never has more unit
  devices than the power plan.
* **margin** — the repair's moves (rebalance, topology, larger devices,
  splits) with "passing" raised to a margin bar: every load is given at
  least that much of its budget to spare where the moves can give it.
* **Pareto** — the area-lean plan, the power-lean plan and margin-rich plans
  at rising bars (0.1, ¼, ½ and 1 of the tightest budget's room beyond the worst margin), filtered to the
  ones that no other beats on power, area and worst margin at once.
"""

from __future__ import annotations

import copy
import math
from typing import Any

import numpy as np

from biastree.planner.costs import Figures, figures, pareto
from biastree.planner.evaluation import Evaluator
from biastree.planner.repair import improve
from biastree.planner.synthesis import Outcome, finish

HEADER = ("Planned by biastree plan from a block list{title} ({what}).\n"
          "Every block's verdict below is what `biastree check` gives on this file.")


def _subtree_loads(tree: Any) -> dict[str, list[int]]:
    out: dict[str, list[int]] = {}
    for i in range(len(tree.loads)):
        for m in tree.mirror_paths[int(tree.b_parent[tree.l_branch[i]])]:
            out.setdefault(tree.mirrors[m], []).append(i)
    return out


def economise_area(data: dict[str, Any], rounds: int = 6) -> dict[str, Any]:
    """``data`` with input devices as small as the checker allows (see the module text)."""
    data = copy.deepcopy(data)
    ev = Evaluator()
    tree, res = ev(data)
    if not bool(res.passed.all()):
        return data
    leaf = {m: all(b["to"] in data["loads"] for b in spec["branches"]) for m, spec in data["mirrors"].items()}
    for _ in range(rounds):
        gained = False
        for leaves in (True, False):
            group = [m for m, spec in data["mirrors"].items() if leaf.get(m) == leaves and spec.get("input_size", 1.0) > 1]
            if not group:
                continue
            trial = dict(data, mirrors=dict(data["mirrors"]))
            for m in group:
                spec = copy.deepcopy(data["mirrors"][m])
                n = spec.get("input_size", 1.0)
                n2 = float(max(1, math.floor(n / 2)))
                for b in spec["branches"]:
                    b["ratio"] = max(1, round(b.get("ratio", 1.0) * n2)) / n2
                spec["input_size"] = n2
                trial["mirrors"][m] = spec
            try:
                t_tree, t_res = ev(trial)
            except Exception:  # noqa: BLE001 — a trial that leaves no valid plan is simply not kept
                continue
            below = _subtree_loads(t_tree)
            keep = [m for m in group if below.get(m) and bool(t_res.passed[below[m]].all())]
            if not keep:
                continue
            saved = data
            data = dict(data, mirrors=dict(data["mirrors"]))
            for m in keep:
                data["mirrors"][m] = trial["mirrors"][m]
            tree, res = ev(data)
            if not bool(res.passed.all()):  # halvings that pass alone but not together: drop those above a failure
                bad = set(np.flatnonzero(~res.passed).tolist())
                below = _subtree_loads(tree)
                data = dict(data, mirrors=dict(data["mirrors"]))
                for m in keep:
                    if bad & set(below.get(m, [])):
                        data["mirrors"][m] = saved["mirrors"][m]
                tree, res = ev(data)
                if not bool(res.passed.all()):
                    data = saved
                    tree, res = ev(data)
                    continue
            gained = True
        if not gained:
            break
    return data


def _outcome(base: Outcome, data: dict[str, Any], what: str, title: str) -> Outcome:
    text, tree, result = finish(data, HEADER.format(title=title, what=what))
    fig = figures(result)
    return Outcome(data, text, tree, result, fig, [], list(base.changes), list(base.decisions) + [f"variant: {what}"])


def alternatives(base: Outcome, blocks: Any = None) -> list[tuple[Figures, Outcome]]:
    """The Pareto set around the power-lean plan ``base`` of ``blocks``: area-lean, power-lean and
    margin-rich plans, none beaten on power, area and worst margin at once; power-lean first."""
    from biastree.planner.synthesis import plan_blocks

    assert base.data is not None and base.figures is not None and base.result is not None
    title = getattr(blocks, "title", "") or ""
    t = f" ({title})" if title else ""
    cands: list[tuple[Figures, Outcome]] = [(base.figures, base)]
    starts = [(1.0, base)]
    if blocks is not None:  # larger intermediate currents: fewer output units per block, more power
        starts += [(k, plan_blocks(blocks, "power", k)) for k in (2.0, 4.0, 8.0)]
    for k, start in starts:
        if not start.ok or start.data is None:
            continue
        area = _outcome(start, economise_area(start.data), f"least device area, intermediate currents ×{k:g}", t)
        if area.ok:
            cands.append((area.figures, area))  # type: ignore[arg-type]
    r = base.result
    room = float(np.min(r.tolerance - r.reference_tolerance))  # the tightest budget's room
    data = base.data
    for share in (0.1, 0.25, 0.5, 1.0):
        bar = max(base.figures.worst_margin, 0.0) + share * room
        data = improve(data, bar)
        alt = _outcome(base, data, f"margin ≥ {bar * 100:.2g} % where the moves reach", t)
        if alt.ok:
            cands.append((alt.figures, alt))  # type: ignore[arg-type]
    return pareto(cands)[:5]
