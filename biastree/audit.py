"""Budgets and verdicts: what each load gets, whether it is inside its
budget, and where its error comes from.

A load's current is  I_ref · Π_stages ratio_s · Π_stages Π_terms f_term,
so its error against the target splits exactly into multiplicative terms:
the plan's own ratio arithmetic (ideal current vs target) and, for every
stage on its path, each effect's factor (β loading, Early effect, …).
Terms are reported as fractions f − 1; they compound, they do not add.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np

from .devices import Array
from .solve import CASES, OperatingPoint
from .topologies import TERM_LABELS, TOPOLOGIES
from .units import format_percent, format_si


@dataclass(frozen=True)
class Audit:
    """Verdicts of every load, with everything needed to explain them."""

    op: OperatingPoint
    target: Array  # (n_loads,)
    delivered: Array  # (n_loads, n_cases): current of one instance
    error: Array  # (n_loads, n_cases): delivered/target − 1
    tolerance: Array  # (n_loads,)
    reference_tolerance: float
    worst_case: Array  # (n_loads,) index into CASES of the largest |error|
    margin: Array  # tolerance − |error|max − reference tolerance (fraction)
    compliance: Array  # (n_loads,) smallest compliance margin over the range, V
    compliance_case: Array  # (n_loads,) case index where it is smallest
    upstream: Array  # (n_loads,) first branch on the path (to a mirror) out of compliance, −1 none
    passed: Array  # bool (n_loads,)
    reference_headroom: float  # supply − input voltage of the first mirror, V

    @property
    def tree(self):  # type: ignore[no-untyped-def]
        return self.op.tree

    @cached_property
    def ideal(self) -> Array:
        """Current each load would get from the ratios alone (ideal mirrors)."""
        tree = self.tree
        lb = tree.l_branch
        return tree.m_ideal_in[tree.b_parent[lb]] * tree.b_ratio[lb]

    # --- per-load explanation -------------------------------------------

    def stages(self, load: int, case: int = 1) -> list[dict[str, Any]]:
        """Stage-by-stage terms along the load's path, at one case."""
        tree, op = self.tree, self.op
        plan = tree.plan
        path = tree.path(load)
        out = []
        for k, m in enumerate(path):
            branch = int(tree.m_in_branch[path[k + 1]]) if k + 1 < len(path) else int(tree.l_branch[load])
            name = tree.mirrors[m]
            mirror = plan.mirrors[name]
            family = "bjt" if tree.m_bipolar[m] else "mos"
            terms = []
            for key in TOPOLOGIES[mirror.topology].terms[family]:
                value = op.b_factors[key][branch, case]
                terms.append({"term": key, "label": TERM_LABELS[key], "value": float(value - 1.0)})
            gain = float(np.prod([1.0 + t["value"] for t in terms])) - 1.0
            out.append(
                {
                    "mirror": name,
                    "device": mirror.device,
                    "topology": mirror.topology,
                    "branch": int(tree.b_index[branch]),
                    "ratio": float(tree.b_ratio[branch]),
                    "input_current": float(op.m_i_in[m, case]),
                    "output_current": float(op.b_current[branch, case]),
                    "fanout": float(tree.m_fanout[m]),
                    "error": gain,
                    "terms": terms,
                }
            )
        return out

    def plan_term(self, load: int) -> float:
        """Error that the ratios alone give: ideal current / target − 1."""
        return float(self.ideal[load] / self.target[load] - 1.0)

    @cached_property
    def _largest(self) -> tuple[Array, Array, Array, list[str]]:
        """Per load, at its worst case: (mirror, term index, value) of the largest term.

        Vectorised over the tree: each branch's best term (its mirror's factors
        and its own), then a running best down every path, one generation at a time.
        """
        tree, op = self.tree, self.op
        keys = list(op.b_factors)
        stacked = np.stack([op.b_factors[k] for k in keys]) - 1.0
        which = np.argmax(np.abs(stacked), axis=0)  # (n_b, cases)
        value = np.take_along_axis(stacked, which[None], axis=0)[0]
        mirror = np.broadcast_to(tree.b_parent[:, None], value.shape)
        # running best down the tree, per mirror (best over the branches above it)
        n_m = len(tree.mirrors)
        best_v = np.zeros((n_m, 3))
        best_k = np.zeros((n_m, 3), dtype=np.int64)
        best_m = np.full((n_m, 3), -1, dtype=np.int64)
        for gen in tree.generations[1:]:
            b = tree.m_in_branch[gen]
            p = tree.b_parent[b]
            take = np.abs(value[b]) > np.abs(best_v[p])
            best_v[gen] = np.where(take, value[b], best_v[p])
            best_k[gen] = np.where(take, which[b], best_k[p])
            best_m[gen] = np.where(take, mirror[b], best_m[p])
        lb = tree.l_branch
        p = tree.b_parent[lb]
        take = np.abs(value[lb]) >= np.abs(best_v[p])
        v = np.where(take, value[lb], best_v[p])
        k = np.where(take, which[lb], best_k[p])
        m = np.where(take, mirror[lb], best_m[p])
        rows = np.arange(len(lb))
        c = self.worst_case
        return m[rows, c], k[rows, c], v[rows, c], keys

    def largest_term(self, load: int) -> tuple[str, str, float]:
        """(stage, term label, value) of the largest contribution at the worst case."""
        best = ("plan", "ratio arithmetic", self.plan_term(load))
        m, k, v, keys = self._largest
        if abs(v[load]) > abs(best[2]):
            best = (self.tree.mirrors[int(m[load])], TERM_LABELS[keys[int(k[load])]], float(v[load]))
        return best

    def reasons(self, load: int) -> list[str]:
        """Why a load fails, in a designer's words (empty when it passes)."""
        tree, op = self.tree, self.op
        plan = tree.plan
        name = tree.loads[load]
        out = []
        worst = int(self.worst_case[load])
        err = float(self.error[load, worst])
        used = abs(err) + self.reference_tolerance
        if used > self.tolerance[load]:
            at = ""
            if isinstance(plan.loads[name].voltage, tuple):
                at = f" at {CASES[worst]} voltage {format_si(plan.loads[name].v_range[worst], 'V')}"
            ref = f" + reference {self.reference_tolerance * 100:.3g} %" if self.reference_tolerance else ""
            stage, label, value = self.largest_term(load)
            out.append(
                f"budget: error {format_percent(err)}{ref} exceeds ±{self.tolerance[load] * 100:.3g} %{at}; "
                f"largest term: {label} at {stage} ({format_percent(value)})"
            )
        if self.compliance[load] < 0:
            case = int(self.compliance_case[load])
            branch = tree.l_branch[load]
            need = float(op.b_min_distance[branch, case])
            have = float(op.b_distance[branch, case])
            parent = tree.mirrors[tree.b_parent[branch]]
            if have - need <= op.b_internal_margin[branch, case]:
                out.append(
                    f"compliance: output of {parent} needs {format_si(need, 'V')} from its rail, "
                    f"has {format_si(have, 'V')} at {format_si(plan.loads[name].v_range[case], 'V')}"
                )
            else:
                out.append(
                    f"compliance: a device inside {parent}'s output stack is "
                    f"{format_si(-float(op.b_internal_margin[branch, case]), 'V')} into its triode region"
                )
        up = int(self.upstream[load])
        if up >= 0:
            parent = tree.mirrors[tree.b_parent[up]]
            child = tree.mirrors[tree.b_child[up]]
            out.append(
                f"headroom: {parent} -> {child} output lacks {format_si(-float(op.b_compliance[up].min()), 'V')} "
                f"(the input of {child} leaves too little voltage for {parent}'s output device)"
            )
        if self.reference_headroom <= 0:
            out.append("headroom: the reference source has no voltage left (first mirror's input exceeds the supply)")
        return out

    @cached_property
    def hints(self) -> dict[int, list[str]]:
        """Computed topology hints for failing loads (see biastree.advise)."""
        from .advise import hints

        return hints(self)

    @cached_property
    def regulation(self) -> tuple[Array, Array, Array]:
        """Load regulation over each load's voltage range: (ΔI in A, ΔI/I_nominal,
        ΔI/ΔV in A/V; 0 for a fixed voltage).  ΔI = I(max voltage) − I(min voltage)."""
        plan = self.tree.plan
        delta = self.delivered[:, 2] - self.delivered[:, 0]
        span = np.array([plan.loads[n].v_range[2] - plan.loads[n].v_range[0] for n in self.tree.loads])
        with np.errstate(invalid="ignore", divide="ignore"):
            per_volt = np.where(span > 0, delta / np.where(span > 0, span, 1.0), 0.0)
        return delta, delta / self.delivered[:, 1], per_volt

    @property
    def rout(self) -> Array:
        """Output resistance seen by each load at its nominal voltage, Ω."""
        return self.op.b_rout[self.tree.l_branch, 1]

    def load_report(self, load: int) -> dict[str, Any]:
        """Everything known about one load, as plain data (the JSON result)."""
        tree, plan = self.tree, self.tree.plan
        name = tree.loads[load]
        lo, nom, hi = plan.loads[name].v_range
        return {
            "name": name,
            "count": int(tree.l_mult[load]),
            "path": ["reference"] + [tree.mirrors[m] for m in tree.path(load)] + [name],
            "target": float(self.target[load]),
            "delivered": float(self.delivered[load, 1]),
            "delivered_range": [float(self.delivered[load, 0]), float(self.delivered[load, 2])],
            "voltage": [lo, nom, hi],
            "error": float(self.error[load, 1]),
            "error_range": [float(self.error[load, 0]), float(self.error[load, 2])],
            "worst_error": float(self.error[load, int(self.worst_case[load])]),
            "worst_case": CASES[int(self.worst_case[load])],
            "reference_tolerance": self.reference_tolerance,
            "tolerance": float(self.tolerance[load]),
            "margin": float(self.margin[load]),
            "compliance_margin": float(self.compliance[load]),
            "verdict": "pass" if self.passed[load] else "fail",
            "reasons": self.reasons(load),
            "plan_error": self.plan_term(load),
            "rout": _finite_or_none(float(self.rout[load])),
            "regulation": {
                "delta_current": float(self.regulation[0][load]),
                "fraction": float(self.regulation[1][load]),
                "per_volt": float(self.regulation[2][load]),
            },
            "hints": self.hints.get(load, []),
            "stages": self.stages(load),
        }

    # --- per-plan summary ------------------------------------------------

    def summary(self) -> dict[str, Any]:
        tree, op = self.tree, self.op
        plan = tree.plan
        to_mirror = np.flatnonzero(~tree.b_to_load)
        inner = op.b_current[to_mirror, 1] * tree.m_mult[tree.b_parent[to_mirror]] * tree.b_count[to_mirror]
        extra = op.m_extra[:, 1] * tree.m_mult  # helper devices and bias sources
        overhead = float(op.i_ref[1] + inner.sum() + extra.sum())
        delivered = float(np.sum(self.delivered[:, 1] * tree.l_mult))
        per_mirror = []
        for i, m in enumerate(tree.mirrors):
            spec = plan.mirrors[m]
            per_mirror.append(TOPOLOGIES[spec.topology].units(
                spec.input_size, float(tree.m_fanout[i]), {"helper_size": spec.helper_size, "swing_n": spec.swing_n}))
        units = tree.m_mult * np.array(per_mirror)
        mos_area = 0.0
        for i, m in enumerate(tree.mirrors):
            dev = plan.devices[plan.mirrors[m].device]
            if not tree.m_bipolar[i]:
                mos_area += units[i] * dev.w * dev.l  # type: ignore[union-attr]
        return {
            "loads": len(tree.loads),
            "instances": int(tree.l_mult.sum()),
            "passed": int(self.passed.sum()),
            "failed": int((~self.passed).sum()),
            "reference_current": float(op.i_ref[1]),
            "overhead_current": overhead,
            "overhead_power": overhead * plan.supply,
            "delivered_current": delivered,
            "supply_current": overhead + delivered,
            "supply_power": (overhead + delivered) * plan.supply,
            "device_units": float(units.sum()),
            "bipolar_units": float(units[tree.m_bipolar].sum()),
            "mos_units": float(units[~tree.m_bipolar].sum()),
            "mos_gate_area": mos_area,
            "reference_headroom": self.reference_headroom,
            "sweeps": op.sweeps,
        }

    def to_dict(self) -> dict[str, Any]:
        """The whole result as plain data (matches schemas/results.schema.json)."""
        plan = self.tree.plan
        return {
            "title": plan.title,
            "supply": plan.supply,
            "temperature": plan.temperature,
            "summary": self.summary(),
            "loads": [self.load_report(i) for i in range(len(self.tree.loads))],
        }


def _finite_or_none(x: float) -> float | None:
    return x if np.isfinite(x) else None


def audit(op: OperatingPoint) -> Audit:
    """Compare every load's current with its budget and explain the result."""
    tree = op.tree
    plan = tree.plan
    target = np.array([plan.loads[n].current for n in tree.loads], dtype=float)
    tolerance = np.array([plan.loads[n].tolerance for n in tree.loads], dtype=float)
    delivered = op.l_current
    error = delivered / target[:, None] - 1.0
    worst = np.argmax(np.abs(error), axis=1)
    worst_abs = np.abs(error[np.arange(len(target)), worst])
    ref_tol = plan.reference.tolerance
    margin = tolerance - worst_abs - ref_tol

    comp = op.b_compliance
    l_comp = comp[tree.l_branch]
    compliance_case = np.argmin(l_comp, axis=1)
    compliance = l_comp[np.arange(len(target)), compliance_case]

    # First out-of-compliance branch between mirrors on each path, top-down.
    n_m = len(tree.mirrors)
    bad_above = np.full(n_m, -1, dtype=np.int64)
    branch_bad = comp.min(axis=1) < 0
    for gen in tree.generations[1:]:
        b = tree.m_in_branch[gen]
        inherited = bad_above[tree.b_parent[b]]
        bad_above[gen] = np.where(inherited >= 0, inherited, np.where(branch_bad[b], b, -1))
    upstream = bad_above[tree.b_parent[tree.l_branch]]

    reference_headroom = float(plan.supply - op.m_v_in[tree.generations[0][0], 1])
    passed = (margin >= 0) & (compliance >= 0) & (upstream < 0) & (reference_headroom > 0)
    return Audit(
        op=op,
        target=target,
        delivered=delivered,
        error=error,
        tolerance=tolerance,
        reference_tolerance=ref_tol,
        worst_case=worst,
        margin=margin,
        compliance=compliance,
        compliance_case=compliance_case,
        upstream=upstream,
        passed=passed,
        reference_headroom=reference_headroom,
    )
