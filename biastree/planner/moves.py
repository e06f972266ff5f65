"""The repair's candidate fixes for one failing mirror, and their trial.

A move edits plain plan data: the mirrors it *owns* are replaced whole (their
ratios rebalanced after the trial's first check), the mirrors it *patches*
only gain a branch (a parent feeding a new mirror), so patches of one parent
by several moves commute.  ``State.trial`` checks a whole level of moves (one
per target) at once with ``check_tree`` — the checker of ``biastree check``.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from biastree.analysis.audit import Audit
from biastree.errors import BiasTreeError
from biastree.physics.topologies import TOPOLOGIES
from biastree.planner.evaluation import Evaluator
from biastree.planner.ratios import realise
from biastree.tree.arrays import Tree

_TOPOLOGY_KEYS = ("helper_size", "bleed", "degeneration", "degeneration_drop", "bias_current", "swing_n")
# cheapest first (unit devices, then extra current); degenerated needs a resistor value, so it is not offered
ORDER = {"bjt": ("simple", "beta_helper", "wilson", "wilson4", "cascode"), "mos": ("simple", "wide_swing", "cascode")}
PRECISE = {"bjt": "wilson4", "mos": "cascode"}  # single-output mirror with the highest output resistance
RANK = {"rebalance": 0, "topology": 1, "local": 1, "size": 2, "longer": 2, "move": 3, "split": 4}


@dataclass
class Limits:
    max_units: int = 64
    max_ratio: float = 16.0
    topologies: set[str] | None = None
    objective: str = "power"
    max_longer: float = 4.0  # MOS: longest gate (× the model's l) a repair may use


@dataclass
class Trial:
    """Plan data for one trial, copied on write per mirror."""

    data: dict[str, Any]
    copied: set[str] = field(default_factory=set)
    added: list[tuple[str, dict[str, Any]]] = field(default_factory=list)  # branches the current edit patched in
    positions: dict[str, Any] = field(default_factory=dict)  # positions of the mirrors it created

    @classmethod
    def of(cls, data: dict[str, Any]) -> "Trial":
        d = dict(data)
        d["mirrors"] = dict(data["mirrors"])
        d["devices"] = dict(data["devices"])
        if "floorplan" in data:
            d["floorplan"] = dict(data["floorplan"])
        return cls(d)

    def spec(self, name: str) -> dict[str, Any]:
        if name not in self.copied:
            self.data["mirrors"][name] = copy.deepcopy(self.data["mirrors"][name])
            self.copied.add(name)
        return self.data["mirrors"][name]


@dataclass
class Move:
    target: str
    kind: str
    label: str
    loads: tuple[str, ...]
    edit: Callable[[Trial], None]
    owns: set[str]
    patches: set[str] = field(default_factory=set)
    reason: str = ""
    # filled by the trial
    final: dict[str, Any] = field(default_factory=dict)
    added: list[tuple[str, dict[str, Any]]] = field(default_factory=list)  # (parent, branch) patches
    devices: dict[str, Any] = field(default_factory=dict)
    local: list[str] = field(default_factory=list)
    positions: dict[str, Any] = field(default_factory=dict)
    cost: tuple[float, float, float] = (0.0, 0.0, 0.0)  # (W, area in base unit devices, worst margin)
    fixed: int = 0  # failing loads it makes pass
    complete: bool = False  # every load it judges passes
    outcome: str = ""  # the worst judged load after the trial, in a few words
    short: float = 0.0  # compliance the judged loads still lack, V
    grown: int = 0  # input device size a compliance growth set (0: none)
    base: "Move | None" = None  # the move it grew from

    @property
    def rank(self) -> int:
        return RANK[self.kind]

    def key(self, objective: str) -> tuple[float, ...]:
        """Most loads fixed first, then the objective."""
        p, a, m = self.cost
        # a saving is no reason to change a designer's mirror: costs below zero count as zero
        p, a = round(max(p, 0.0), 12), round(max(a, 0.0), 6)
        if objective == "area":
            return (-self.fixed, a, p, -m)
        if objective == "margin":
            return (-self.fixed, -round(m, 6), p, a)
        return (-self.fixed, p, a, -m)

    def apply(self, data: dict[str, Any]) -> None:
        data["mirrors"].update(copy.deepcopy(self.final))
        for parent, branch in self.added:
            spec = copy.deepcopy(data["mirrors"][parent])
            spec["branches"].append(dict(branch))
            data["mirrors"][parent] = spec
        data["devices"].update(self.devices)
        if self.local:
            fp = data["floorplan"]
            fp["remote"] = [n for n in fp["remote"] if n not in self.local]
        if self.positions:
            data["floorplan"]["positions"].update(self.positions)


def family(data: dict[str, Any], mirror: str) -> str:
    kind = data["devices"][data["mirrors"][mirror]["device"]]["kind"]
    return "bjt" if kind in ("npn", "pnp") else "mos"


def set_topology(spec: dict[str, Any], topology: str) -> None:
    spec["topology"] = topology
    for k in _TOPOLOGY_KEYS:
        if k in spec and k not in TOPOLOGIES[topology].params:
            del spec[k]


def ratio_text(spec: dict[str, Any], shown: int = 4) -> str:
    n = spec.get("input_size", 1.0)
    parts = [f"{b['to']} {b.get('ratio', 1.0) * n:.4g} u" + (f" ×{b['count']}" if b.get("count", 1) != 1 else "")
             for b in spec["branches"][:shown]]
    more = f", … (+{len(spec['branches']) - shown})" if len(spec["branches"]) > shown else ""
    return f"input {n:g} u: " + ", ".join(parts) + more


class State:
    """The plan being repaired, its latest check, and what was tried."""

    def __init__(self, data: dict[str, Any], evaluate: Evaluator, limits: Limits) -> None:
        self.data = data
        self.evaluate = evaluate
        self.limits = limits
        self.tree: Tree
        self.result: Audit
        self.tried: dict[str, dict[str, str]] = {}  # mirror → move → outcome
        self.area_factor: dict[str, float] = {}
        self.levels = 0
        self.bar = 0.0  # a load counts as passing when it passes with at least this budget margin left
        self.rounds: list[tuple[int, int, int]] = []  # (targets, levels, checks) per round

    def check(self) -> None:
        self.tree, self.result = self.evaluate(self.data)

    def ok(self, r: Audit) -> np.ndarray:
        """Loads that pass (with the margin bar, when one is set)."""
        return r.passed & (r.margin >= self.bar) if self.bar > 0 else r.passed

    # --- one level of moves -------------------------------------------------

    def trial(self, level: list[Move]) -> list[bool]:
        try:
            return self._trial(level)
        except BiasTreeError:
            if len(level) == 1:
                return [False]
            half = len(level) // 2  # one move leaves no valid plan: find it by halves
            return self.trial(level[:half]) + self.trial(level[half:])

    def _trial(self, level: list[Move]) -> list[bool]:
        t = Trial.of(self.data)
        for mv in level:
            t.added, t.positions = [], {}
            mv.edit(t)
            mv.added, mv.positions = t.added, t.positions
        owned = set().union(*(mv.owns for mv in level))
        tree, res = self.evaluate(t.data)
        for _ in range(2):
            if not rebalance(t, tree, res, owned, self.limits):
                break
            tree, res = self.evaluate(t.data)
        out = []
        index = {n: k for k, n in enumerate(tree.loads)}
        was = dict(zip(self.tree.loads, self.ok(self.result).tolist()))
        good = self.ok(res)
        for mv in level:
            judged = {index[n] for n in mv.loads}
            for n in mv.owns:
                judged |= {index[b["to"]] for b in t.data["mirrors"][n]["branches"] if b["to"] in index}
            ids = sorted(judged)
            passed = good[ids]
            broke = any(was.get(tree.loads[k], False) and not ok for k, ok in zip(ids, passed.tolist()))
            mv.fixed = sum(1 for n in mv.loads if bool(good[index[n]]))
            mv.complete = bool(passed.all())
            mv.final = {n: copy.deepcopy(t.data["mirrors"][n]) for n in mv.owns}
            mv.cost = self._cost(mv, tree, res, judged)
            worst = min(ids, key=lambda k: min(float(res.margin[k]), float(res.worst_compliance[k]) * 10))
            mv.short = max(0.0, -float(np.min(res.worst_compliance[ids])))
            if res.worst_compliance[worst] < 0:
                mv.outcome = f"compliance {res.worst_compliance[worst] * 1e3:+.0f} mV"
            elif res.upstream[worst] >= 0:
                mv.outcome = "headroom"
            else:
                mv.outcome = f"margin {res.margin[worst] * 100:+.2g} %"
            out.append(not broke and mv.fixed > 0)
            self.tried.setdefault(mv.target, {})[mv.label] = mv.outcome
        return out

    def _cost(self, mv: Move, tree: Tree, res: Audit, judged: set[int]) -> tuple[float, float, float]:
        supply = self.data["supply"]
        power = area = 0.0
        for n in mv.owns:
            c1, u1 = mirror_cost(tree, res, n, self.area_factor, mv.devices)
            c0, u0 = mirror_cost(self.tree, self.result, n, self.area_factor)
            power += supply * (c1 - c0)
            area += u1 - u0
        for parent, branch in mv.added:
            m = tree.mirrors.index(parent)
            b = int(tree.m_in_branch[tree.mirrors.index(branch["to"])])
            power += supply * float(res.op.b_current[b, 1]) * float(tree.b_count[b] * tree.m_mult[m])
            area += float(tree.b_ratio[b] * tree.b_count[b]) * self.data["mirrors"][parent].get("input_size", 1.0) \
                * _unit_weight(self.data["mirrors"][parent]["topology"]) * float(tree.m_mult[m])
        margin = float(np.min(res.margin[sorted(judged)])) if judged else -1.0
        return power, area, margin


def _unit_weight(topology: str) -> float:
    """Unit devices one more output unit costs (d units / d fan-out at input size 1)."""
    units = TOPOLOGIES[topology].units
    p = {"helper_size": 1.0, "swing_n": 1.25}
    return units(1.0, 2.0, p) - units(1.0, 1.0, p)


def mirror_cost(tree: Tree, r: Audit, name: str, area_factor: dict[str, float],
                devices: dict[str, Any] | None = None) -> tuple[float, float]:
    """(overhead current drawn, area in base unit devices) of one mirror; (0, 0) when absent."""
    if name not in tree.mirrors:
        return 0.0, 0.0
    m = tree.mirrors.index(name)
    spec = tree.plan.mirrors[name]
    mult = float(tree.m_mult[m])
    units = mult * TOPOLOGIES[spec.topology].units(spec.input_size, float(tree.m_fanout[m]),
                                                  {"helper_size": spec.helper_size, "swing_n": spec.swing_n})
    cur = float(r.op.m_extra[m, 1]) * mult
    inner = np.flatnonzero((tree.b_parent == m) & ~tree.b_to_load)
    cur += float(np.sum(r.op.b_current[inner, 1] * tree.b_count[inner])) * mult
    return cur, units * area_factor.get(spec.device, 1.0)


# --- rebalance ---------------------------------------------------------------------

def rebalance(t: Trial, tree: Tree, r: Audit, mirrors: set[str], limits: Limits) -> bool:
    """Set every load branch of ``mirrors`` so that the middle of its error range (over the
    voltage ends and the plan's conditions) is zero, in whole unit devices; branches into
    mirrors keep their ratio within a third of the margin left below them."""
    acted = False
    err = r.error
    if r.conditions is not None:
        err = np.concatenate([err, r.conditions.error], axis=1)
    lo, hi = err.min(axis=1), err.max(axis=1)
    below = _margin_below(tree, r)
    for name in sorted(mirrors):
        if name not in tree.mirrors:
            continue
        m = tree.mirrors.index(name)
        spec = t.spec(name)
        branches = spec["branches"]
        ids = {int(tree.b_index[b]): b for b in np.flatnonzero(tree.b_parent == m).tolist()}
        ratios, allowed = [], []
        for k, br in enumerate(branches):
            b = ids[k]
            ratio = br.get("ratio", 1.0)
            if tree.b_to_load[b]:
                i = int(tree.b_child[b])
                mid = 0.5 * (lo[i] + hi[i])
                half = 0.5 * (hi[i] - lo[i])
                slack = float(r.tolerance[i] - r.reference_tolerance - r.k_sigma * r.sigma[i] - half)
                if r.compliance[i] < 0 or r.upstream[i] >= 0 or not -0.9 < mid < 9:
                    ratios.append(ratio)  # a current out of compliance says nothing about the ratio it needs
                    allowed.append(1e-9)
                    continue
                ratios.append(ratio / (1.0 + mid))
                allowed.append(max(0.4 * slack, 2e-4))
            else:
                ratios.append(ratio)
                allowed.append(max(0.3 * below[int(tree.b_child[b])], 1e-9))
        size = spec.get("input_size", 1.0)
        start = int(size) if float(size).is_integer() else 1
        got = realise(ratios, allowed, limits.max_units, start=start, max_ratio=limits.max_ratio)
        if got is None:
            continue
        n_in, units = got
        new = [u / n_in for u in units]
        if float(n_in) == size and all(abs(a - b.get("ratio", 1.0)) < 1e-15 for a, b in zip(new, branches)):
            continue
        spec["input_size"] = float(n_in)
        for br, v in zip(branches, new):
            br["ratio"] = v
        acted = True
    return acted


def _margin_below(tree: Tree, r: Audit) -> np.ndarray:
    """(n_mirrors,) smallest margin of the loads below each mirror (0 where any fails)."""
    out = np.full(len(tree.mirrors), np.inf)
    owner = tree.b_parent[tree.l_branch]
    np.minimum.at(out, owner, np.where(r.passed, r.margin, 0.0))
    for gen in reversed(tree.generations[1:]):
        parents = tree.b_parent[tree.m_in_branch[gen]]
        np.minimum.at(out, parents, out[gen])
    return np.where(np.isfinite(out), np.maximum(out, 0.0), 0.0)


# --- the candidates ---------------------------------------------------------------

def candidates(state: State, mirror: str, failing: list[int]) -> list[Move]:
    """Every fix worth a trial for ``mirror`` (whose loads ``failing`` fail), cheapest kind first."""
    data, tree, r, lim = state.data, state.tree, state.result, state.limits
    names = tuple(tree.loads[i] for i in failing)
    spec = data["mirrors"][mirror]
    fam = family(data, mirror)
    out: list[Move] = []

    def owned(kind: str, label: str, edit: Callable[[Trial], None], owns: set[str] | None = None,
              reason: str = "", patches: set[str] | None = None) -> Move:
        return Move(mirror, kind, label, names, edit, owns or {mirror}, patches or set(), reason)

    out.append(owned("rebalance", "rebalance", lambda t: t.spec(mirror), reason="ratios rebalanced"))
    own_loads = [b["to"] for b in spec["branches"] if b["to"] in data["loads"]]
    single = len(spec["branches"]) == 1 and spec["branches"][0].get("count", 1) == 1
    for topo in ORDER[fam]:
        if topo == spec.get("topology", "simple") or (lim.topologies is not None and topo not in lim.topologies):
            continue
        if TOPOLOGIES[topo].single_output and not single:
            continue
        out.append(owned("topology", f"topology {topo}",
                         lambda t, topo=topo: set_topology(t.spec(mirror), topo), reason=_topology_reason(topo)))
    # larger devices: mismatch (area law) or compliance (lower V_BE / V_ov at a lower current density)
    size = spec.get("input_size", 1.0)
    biggest = size * max([1.0] + [b.get("ratio", 1.0) for b in spec["branches"]])
    room = lim.max_units / biggest
    need = _mismatch_need(r, tree, mirror, failing)
    short = max([-float(r.compliance[i]) for i in failing if r.compliance[i] < 0] or [0.0])
    dev = data["devices"][spec["device"]]
    card = "model" in dev
    vt = 0.0259  # thermal voltage near 27 °C: V_BE falls by V_T·ln k at k× the area
    if short > 0 and room >= 2 and (fam == "mos" or vt * math.log(room) >= short):
        k = math.exp(short / vt) if fam == "bjt" else 4.0
        k = int(min(room, max(2.0, math.ceil(k))))
        out.append(owned("size", f"size ×{k}", lambda t, k=k: _grow(t.spec(mirror), k),
                         reason="larger devices run at a lower current density, so they need less voltage"))
    if need > 1.0:
        if fam == "bjt" and room >= 2:
            k = int(min(room, max(2.0, math.ceil(need * 1.1))))
            out.append(owned("size", f"size ×{k}", lambda t, k=k: _grow(t.spec(mirror), k),
                             reason=f"mismatch σ falls as 1/√area: ×{k} area"))
        elif fam == "mos" and not card:
            c = min(lim.max_longer, math.sqrt(need * 1.1))
            c = math.ceil(c * 4) / 4
            if c > 1:
                out.append(_longer(state, mirror, names, c))
    remote = set((data.get("floorplan") or {}).get("remote", []))
    far = [n for n in own_loads if n in remote]
    if far:
        def local(t: Trial, far: list[str] = far) -> None:
            t.spec(mirror)
            t.data["floorplan"]["remote"] = [n for n in t.data["floorplan"]["remote"] if n not in far]
        mv = owned("local", "local outputs", local, reason="an output device beside the mirror removes the die-gradient term of a long base/gate line")
        mv.local = far
        out.append(mv)
    matched = {n for p in data.get("matched", {}).values() for n in p["loads"]}
    movable = [n for n in names if n in own_loads and n not in matched]
    if movable and len(spec["branches"]) > len(movable):
        for better in (True, False):
            other = _nearest(state, mirror, movable, better)
            if other is not None and all(mv.label != f"move to {other}" for mv in out):
                out.append(_move_to(state, mirror, other, movable))
        parent = _parent(tree, mirror)
        if parent is None:  # the root: a mirror of the other polarity below it can feed the new mirror
            parent = next((b["to"] for b in spec["branches"] if b["to"] in data["mirrors"]), None)
        if parent is not None:
            for topo, per, together in (("simple", 4.0, True), ("simple", 4.0, False), ("simple", 1.0, False),
                                        (PRECISE[fam], 1.0, False)):
                if (lim.topologies is None or topo in lim.topologies) and (len(movable) > 1 or not together):
                    out.append(_split(state, mirror, parent, movable, topo, per, together))
    return out


def _topology_reason(topo: str) -> str:
    return {"simple": "the simplest mirror serves these blocks", "beta_helper": "a β helper cuts base-current loading to ~1/β²",
            "wilson": "a Wilson mirror's feedback raises the output resistance and cancels base currents",
            "wilson4": "an improved Wilson holds equal V_CE on the mirror pair and has high output resistance",
            "cascode": "a cascode's output resistance keeps the voltage range out of the error",
            "wide_swing": "a wide-swing cascode: high output resistance at low headroom"}[topo]


def _grow(spec: dict[str, Any], k: int) -> None:
    spec["input_size"] = spec.get("input_size", 1.0) * k


def _mismatch_need(r: Audit, tree: Tree, mirror: str, failing: list[int]) -> float:
    """Area factor on ``mirror`` that would bring the worst failing load's k·σ within its budget (0: not mismatch)."""
    if r.spread is None:
        return 0.0
    need = 0.0
    for i in failing:
        ks = r.k_sigma * float(r.sigma[i])
        if ks <= 0 or float(r.margin[i]) >= 0 or ks + float(r.margin[i]) <= 0:
            continue  # not a mismatch failure, or more than the mismatch would have to go
        want = ks + float(r.margin[i]) * 1.05  # k·σ that would just pass
        stage = sum(s * s for n, s in r.spread.stage_sigmas(i) if n == mirror)
        rest = float(r.sigma[i]) ** 2 - stage
        target = (want / r.k_sigma) ** 2 - rest
        need = max(need, stage / target if target > 0 else 16.0)
    return need


def _longer(state: State, mirror: str, names: tuple[str, ...], c: float) -> Move:
    """MOS: scale W and L of the mirror's unit device by c (same W/L, same V_ov; area ×c², σ_VT ×1/c)."""
    data = state.data
    base = data["mirrors"][mirror]["device"]
    dev = dict(data["devices"][base])
    dev["w"], dev["l"] = dev["w"] * c, dev["l"] * c
    name = f"{base}_x{c:g}".replace(".", "p")
    mv = Move(mirror, "longer", f"longer ×{c:g}", names, lambda t: None, {mirror},
              reason=f"W and L ×{c:g} at the same W/L: same V_ov, σ(V_T) ×1/{c:g}, gate area ×{c * c:g}")

    def edit(t: Trial) -> None:
        t.data["devices"][name] = dev
        t.spec(mirror)["device"] = name

    mv.edit = edit
    mv.devices = {name: dev}
    state.area_factor[name] = state.area_factor.get(base, 1.0) * c * c
    return mv


def _parent(tree: Tree, mirror: str) -> str | None:
    b = int(tree.m_in_branch[tree.mirrors.index(mirror)])
    return tree.mirrors[int(tree.b_parent[b])] if b >= 0 else None


def _nearest(state: State, mirror: str, movable: list[str], better: bool) -> str | None:
    """A passing mirror of the same device (``better``: with more output resistance), nearest on the die."""
    data, tree, r = state.data, state.tree, state.result
    spec = data["mirrors"][mirror]
    fam = family(data, mirror)
    order = ORDER[fam]
    mine = order.index(spec["topology"]) if spec["topology"] in order else 0
    pos = (data.get("floorplan") or {}).get("positions", {})
    here = pos.get(movable[0]) or pos.get(mirror)
    owner = tree.b_parent[tree.l_branch]
    bad = set(owner[~state.ok(r)].tolist())
    best: tuple[float, str] | None = None
    for k, name in enumerate(tree.mirrors):
        other = data["mirrors"][name]
        if name == mirror or k in bad or other["device"] != spec["device"] or TOPOLOGIES[other["topology"]].single_output:
            continue
        if better and (other["topology"] not in order or order.index(other["topology"]) <= mine):
            continue
        if any(b["to"] in state.data["mirrors"] for b in other["branches"]) or not _parent(tree, name):
            continue  # only block mirrors: a distribution mirror's ratios feed whole subtrees
        if len(other["branches"]) >= 12:
            continue
        there = pos.get(name)
        d = math.dist(here, there) if here is not None and there is not None else 0.0
        if best is None or d < best[0]:
            best = (d, name)
    return None if best is None else best[1]


def _move_to(state: State, mirror: str, other: str, movable: list[str]) -> Move:
    tree, r = state.tree, state.result
    i_other = float(r.op.m_i_in[tree.mirrors.index(other), 1])
    loads = state.data["loads"]

    def edit(t: Trial) -> None:
        src, dst = t.spec(mirror), t.spec(other)
        moved = [b for b in src["branches"] if b["to"] in movable]
        src["branches"] = [b for b in src["branches"] if b["to"] not in movable]
        for b in moved:
            dst["branches"].append({**b, "ratio": loads[b["to"]]["current"] / i_other})

    return Move(mirror, "move", f"move to {other}", tuple(movable), edit, {mirror, other},
                reason=f"{other} is a {state.data['mirrors'][other]['topology']} mirror of the same device nearby")


def _split(state: State, mirror: str, parent: str, movable: list[str], topo: str, per: float,
           together: bool = False) -> Move:
    """The loads get a mirror of their own (one each, or ``together`` one for all), ``topo``, fed by
    ``parent``: its input current is the loads' / ``per`` but at least one unit of the parent (whole
    units on both sides); a branch's count stays on the new mirror's output (one input for all copies)."""
    tree, r, data = state.tree, state.result, state.data
    p = tree.mirrors.index(parent)
    i_p = float(r.op.m_i_in[p, 1])
    n_p = data["mirrors"][parent].get("input_size", 1.0)
    spec = data["mirrors"][mirror]
    counts = {b["to"]: b.get("count", 1) for b in spec["branches"]}
    groups = [list(movable)] if together else [[n] for n in movable]
    plan: list[tuple[str, float, float, list[tuple[str, float]]]] = []
    taken: set[str] = set()
    for group in groups:
        currents = [data["loads"][n]["current"] for n in group]
        u_p = max(1, min(state.limits.max_units, round(min(currents) / per / i_p * n_p)))
        i_new = i_p * u_p / n_p
        got = realise([c / i_new for c in currents], [2e-3] * len(group), state.limits.max_units,
                      max_ratio=state.limits.max_ratio)
        n_new, u_new = got if got is not None else (1, [max(1, round(c / i_new)) for c in currents])
        new = f"{mirror}_{group[0]}" + ("" if topo == "simple" else f"_{topo}")
        while new in data["mirrors"] or new in data["loads"] or new in taken:
            new += "_"
        taken.add(new)
        plan.append((new, u_p / n_p, float(n_new), [(n, u / n_new) for n, u in zip(group, u_new)]))
    owns = {mirror} | {x[0] for x in plan}

    def edit(t: Trial) -> None:
        src = t.spec(mirror)
        src["branches"] = [b for b in src["branches"] if b["to"] not in movable]
        single = TOPOLOGIES[topo].single_output  # one output with count 1: the copies become mirror instances
        for new, ratio_p, n_new, outs in plan:
            branch = {"to": new, "ratio": ratio_p}
            if single and counts[outs[0][0]] != 1:
                branch["count"] = counts[outs[0][0]]
            t.spec(parent)["branches"].append(branch)
            t.added.append((parent, branch))
            t.data["mirrors"][new] = {"device": src["device"], "input_size": n_new, "topology": topo, "branches": [
                {"to": n, "ratio": ratio, **({"count": counts[n]} if counts[n] != 1 and not single else {})}
                for n, ratio in outs]}
            t.copied.add(new)
            fp = t.data.get("floorplan")
            pos = (fp or {}).get("positions", {})
            if outs[0][0] in pos:
                fp["positions"] = dict(pos, **{new: pos[outs[0][0]]})
                t.positions[new] = pos[outs[0][0]]

    label = f"split ({'together, ' if together else ''}{topo}, input ≈ load/{per:g})"
    where = "one mirror for them" if together else "a mirror of its own"
    return Move(mirror, "split", label, tuple(movable), edit, owns, {parent},
                reason=f"{where} ({topo}), fed by {parent}")


def grown(state: State, mv: Move) -> Move | None:
    """``mv`` with its (new) mirrors' input devices made larger, when it failed by a little
    compliance: k× the area lowers V_BE by V_T·ln k (V_ov by √k for MOS).  At most two steps."""
    if mv.short <= 0 or mv.kind not in ("topology", "split") or (mv.grown and mv.base is not None and mv.base.grown):
        return None
    vt = 0.0259  # thermal voltage near 27 °C
    fam = family(state.data, mv.target)
    names = [n for n in mv.final if n != mv.target] if mv.kind == "split" else [mv.target]
    k = 0
    for n in names:
        spec = mv.final[n]  # its ratios; the trial's rebalance starts from the grown input device
        room = int(state.limits.max_units // max([1.0] + [b.get("ratio", 1.0) for b in spec["branches"]]))
        need = max(mv.grown, 1) * (math.exp(2.0 * mv.short / vt) if fam == "bjt" else 4.0)
        if room <= max(mv.grown, 1) or (fam == "bjt" and vt * math.log(room) < mv.short):
            return None
        k = max(k, int(min(room, max(2, math.ceil(need)))))
    root = mv.base if mv.grown and mv.base is not None else mv
    first = root.edit

    def edit(t: Trial) -> None:
        first(t)
        for n in names:
            t.spec(n)["input_size"] = float(k)

    out = Move(mv.target, mv.kind, f"{root.label}, input {k} u", mv.loads, edit, set(mv.owns), set(mv.patches),
               root.reason + f"; input device {k} u for compliance (a lower current density: V_BE falls by V_T·ln {k})")
    out.grown, out.base = k, (root if not mv.grown else mv)
    out.devices, out.local = dict(mv.devices), list(mv.local)
    return out
