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
from typing import TYPE_CHECKING, Any, Callable

import numpy as np

from biastree.analysis.solve import CASES, OperatingPoint, solve
from biastree.physics.devices import Array
from biastree.physics.topologies import TERM_LABELS, TOPOLOGIES
from biastree.units import format_percent, format_si

if TYPE_CHECKING:
    from biastree.tree.arrays import Tree


def path_largest(tree: Tree, value: Array, which: Array, ties_to_load: bool = False) -> tuple[Array, Array, Array]:
    """Per load and column: (mirror, term index, value) of the largest stage term on its path,
    given each branch's largest ``value`` (n_b, C) and its term index ``which``; a running best
    down the tree, one generation at a time (a later stage wins only when strictly larger; the
    load's own branch also on a tie when ``ties_to_load``)."""
    n_m, n_c = len(tree.mirrors), value.shape[1]
    best_v = np.zeros((n_m, n_c))
    best_k = np.zeros((n_m, n_c), dtype=np.int64)
    best_m = np.full((n_m, n_c), -1, dtype=np.int64)
    for gen in tree.generations[1:]:
        b = tree.m_in_branch[gen]
        p = tree.b_parent[b]
        take = np.abs(value[b]) > np.abs(best_v[p])
        best_v[gen] = np.where(take, value[b], best_v[p])
        best_k[gen] = np.where(take, which[b], best_k[p])
        best_m[gen] = np.where(take, p[:, None], best_m[p])
    lb = tree.l_branch
    p = tree.b_parent[lb]
    mag, best = np.abs(value[lb]), np.abs(best_v[p])
    take = mag >= best if ties_to_load else mag > best
    return (np.where(take, p[:, None], best_m[p]), np.where(take, which[lb], best_k[p]),
            np.where(take, value[lb], best_v[p]))


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
    conditions: Any = None  # biastree.corners.ConditionResult, when the plan lists conditions
    spread: Any = None  # biastree.spread.Analytic, when devices carry matching coefficients
    k_sigma: float = 3.0
    # Computes hints for failing loads (biastree.analysis.advise.hints); set by the
    # caller so that the audit never imports the layer that searches above it.
    advisor: Callable[["Audit"], dict[int, list[str]]] | None = None

    @property
    def tree(self):  # type: ignore[no-untyped-def]
        return self.op.tree

    @cached_property
    def worst_compliance(self) -> Array:
        """(n_loads,) smallest compliance margin over the voltage range and, when the plan
        lists conditions, over all of them too, V (``compliance`` is the range alone)."""
        if self.conditions is None:
            return self.compliance
        return np.minimum(self.compliance, self.conditions.compliance)

    @cached_property
    def ideal(self) -> Array:
        """Current each load would get from the ratios alone (ideal mirrors)."""
        tree = self.tree
        lb = tree.l_branch
        return tree.m_ideal_in[tree.b_parent[lb]] * tree.b_ratio[lb]

    # --- per-load explanation -------------------------------------------

    def stages(self, load: int, case: int = 1, op: OperatingPoint | None = None) -> list[dict[str, Any]]:
        """Stage-by-stage terms along the load's path, at one case (column) of ``op``
        (default: the audit's own operating point; empty terms when it was solved
        without them).

        Each stage's dict is built once per branch and case and shared by every
        load below that branch: treat the dicts as read-only."""
        rows = self._stage_rows(case, op)
        tree = self.tree
        return [rows[b] for b in tree.mirror_branch_paths[int(tree.b_parent[tree.l_branch[load]])]] + \
            [rows[int(tree.l_branch[load])]]

    @cached_property
    def _stage_cache(self) -> dict[Any, list[dict[str, Any]]]:
        return {}

    @cached_property
    def _card_beta_cache(self) -> dict[tuple[int, int], tuple[OperatingPoint, dict[int, tuple[float, str]]]]:
        return {}

    def _stage_rows(self, case: int, op: OperatingPoint | None = None) -> list[dict[str, Any]]:
        """One stage dict per branch (the stage a load passes through when its
        path takes that branch), built in one pass from the arrays; cached for
        the audit's own operating point."""
        # cached for the audit's own operating point and for the deciding condition
        # columns' (``_condition_terms``): every load's deciding case reads one of them
        terms = self.__dict__.get("_condition_terms")
        own = op is None or op is self.op
        slot = case if own else (("conditions", case) if terms is not None and op is terms[0] else None)
        cached = self._stage_cache.get(slot) if slot is not None else None
        if cached is not None:
            return cached
        tree, op = self.tree, (self.op if op is None else op)
        plan = tree.plan
        per_mirror = []
        for m, name in enumerate(tree.mirrors):
            mirror = plan.mirrors[name]
            family = "bjt" if tree.m_bipolar[m] else "mos"
            keys = [k for k in TOPOLOGIES[mirror.topology].terms[family] if k in op.b_factors]
            per_mirror.append((name, mirror.device, mirror.topology, [(k, TERM_LABELS[k]) for k in keys]))
        factors = {k: v[:, case].tolist() for k, v in op.b_factors.items()}
        i_in = op.m_i_in[:, case].tolist()
        current = op.b_current[:, case].tolist()
        fanout = tree.m_fanout.tolist()
        ratio = tree.b_ratio.tolist()
        index = tree.b_index.tolist()
        key = (id(op), case)
        if key not in self._card_beta_cache:  # the op is kept with its entry: its id stays its own
            self._card_beta_cache[key] = (op, _card_betas(tree, op, case))
        card_beta = self._card_beta_cache[key][1]
        rows = []
        for b, m in enumerate(tree.b_parent.tolist()):
            name, device, topology, keys = per_mirror[m]
            terms = []
            gain = 1.0
            for key, label in keys:
                value = factors[key][b]
                if key == "gradient" and value == 1.0:
                    continue  # only remote output devices have a gradient term
                term = {"term": key, "label": label, "value": value - 1.0}
                if key == "beta" and b in card_beta:  # the label stays: hints look terms up by it
                    term["beta"], term["note"] = card_beta[b]
                terms.append(term)
                gain *= 1.0 + (value - 1.0)
            rows.append(
                {
                    "mirror": name,
                    "device": device,
                    "topology": topology,
                    "branch": index[b],
                    "ratio": ratio[b],
                    "input_current": i_in[m],
                    "output_current": current[b],
                    "fanout": fanout[m],
                    "error": gain - 1.0,
                    "terms": terms,
                }
            )
        if slot is not None:
            self._stage_cache[slot] = rows
        return rows

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
        keys = list(op.b_factors) or ["beta"]
        n = len(tree.b_parent)
        stacked = (np.stack([op.b_factors[k] for k in keys]) if op.b_factors else np.ones((1, n, op.b_current.shape[1]))) - 1.0
        which = np.argmax(np.abs(stacked), axis=0)  # (n_b, cases)
        value = np.take_along_axis(stacked, which[None], axis=0)[0]
        m, k, v = path_largest(tree, value, which, ties_to_load=True)
        lb = tree.l_branch
        rows = np.arange(len(lb))
        c = self.worst_case
        return m[rows, c], k[rows, c], v[rows, c], keys

    def largest_term(self, load: int) -> tuple[str, str, float]:
        """(stage, term label, value) of the largest contribution in the case that decides
        the load (``deciding``): with conditions in the plan, taken from that case's terms
        (the reference's own drift left out: no mirror change fixes it); without, found
        vectorised at the worst end of the voltage range — the same case."""
        if self.conditions is not None:
            top = next(t for t in self.deciding(load)["terms"] if t["stage"] != "reference")
            return top["stage"], top["label"], float(top["value"])
        best = ("plan", "ratio arithmetic", self.plan_term(load))
        m, k, v, keys = self._largest
        if abs(v[load]) > abs(best[2]):
            best = (self.tree.mirrors[int(m[load])], TERM_LABELS[keys[int(k[load])]], float(v[load]))
        return best

    @cached_property
    def _condition_terms(self) -> tuple[OperatingPoint, dict[int, int]] | None:
        """The condition columns that decide some load, solved again with their error
        terms (the condition matrix is solved without them, for speed)."""
        if self.conditions is None:
            return None
        index = np.unique(self.conditions.worst_index)
        op = solve(self.tree, self.conditions.columns.take(index), output_resistance=True)
        return op, {int(c): k for k, c in enumerate(index)}

    def deciding(self, load: int) -> dict[str, Any]:
        """The case that decides the load's budget verdict, broken into its terms.

        The deciding case is the one whose |error| enters the margin: the worst
        end of the voltage range at the plan's own conditions, or the worst
        column of the condition matrix when that is larger.  Its terms are exact:
        Π(1 + term) − 1 over ``terms`` is that case's error; ``used`` adds the
        k·σ mismatch term and the reference tolerance, and tolerance − used is
        the margin.

        >>> import biastree
        >>> d = biastree.check("samples/die_spread.yaml").deciding(3)
        >>> d["condition"]["name"], d["end"]
        ('-40C 3.6V weak min', 'min')
        >>> d["terms"][0]["label"], round(d["terms"][0]["value"], 4)
        ('die gradient', 0.1567)
        """
        tree = self.tree
        plan = tree.plan
        worst = int(self.worst_case[load])
        error = float(self.error[load, worst])
        op, case, end, condition = self.op, worst, CASES[worst], None
        cond = self.conditions
        if cond is not None and abs(float(cond.worst_error[load])) > abs(error):
            k = int(cond.worst_index[load])
            op, where = self._condition_terms  # type: ignore[misc]
            case, end, error = where[k], cond.end(k), float(cond.worst_error[load])
            cols = cond.columns
            condition = {"name": cols.names[k], "temperature": float(cols.temperature[k]),
                         "supply": float(cols.supply[k]), "corner": cols.corner[k] or None}
        stages = self.stages(load, case, op)
        terms = [{"stage": "plan", "term": "ratio", "label": "ratio arithmetic", "value": self.plan_term(load)}]
        drift = float(op.i_ref[case] / plan.reference.current - 1.0)
        if drift:
            terms.append({"stage": "reference", "term": "reference_drift", "label": "reference at this temperature",
                          "value": drift})
        terms += [{"stage": st["mirror"], **t} for st in stages for t in st["terms"]]
        terms.sort(key=lambda t: -abs(t["value"]))
        k_term = self.k_sigma * float(self.sigma[load])
        return {
            "end": end,
            "voltage": float(op.columns.v_load[load, case]) if op.columns is not None else float("nan"),
            "condition": condition,
            "error": error,
            "k": self.k_sigma,
            "k_sigma": k_term,
            "reference": self.reference_tolerance,
            "used": abs(error) + k_term + self.reference_tolerance,
            "tolerance": float(self.tolerance[load]),
            "margin": float(self.margin[load]),
            "terms": terms,
            "stages": stages,
        }

    def deciding_text(self, load: int, decision: dict[str, Any] | None = None) -> str:
        """Words for the deciding case: '-40C 3.6V weak, min voltage 800 mV' or 'max voltage 2 V'."""
        d = self.deciding(load) if decision is None else decision
        spec = self.tree.plan.loads[self.tree.loads[load]]
        volts = f"{d['end']} voltage {format_si(d['voltage'], 'V')}" if isinstance(spec.voltage, tuple) \
            else f"node voltage {format_si(d['voltage'], 'V')}"
        if d["condition"] is None:
            return volts
        name = d["condition"]["name"]
        if name.endswith(" " + d["end"]):
            name = name[: -len(d["end"]) - 1]
        return f"{name}, {volts}"

    @cached_property
    def sigma(self) -> Array:
        """(n_loads,) first-order mismatch σ of each load's current (0 without coefficients)."""
        return self.spread.mismatch if self.spread is not None else np.zeros(len(self.target))

    def worst_error(self, load: int) -> tuple[float, str]:
        """Largest |error| over the voltage range and (when listed) the plan's conditions."""
        plan = self.tree.plan
        name = self.tree.loads[load]
        worst = int(self.worst_case[load])
        err = float(self.error[load, worst])
        at = ""
        if isinstance(plan.loads[name].voltage, tuple):
            at = f"at {CASES[worst]} voltage {format_si(plan.loads[name].v_range[worst], 'V')}"
        if self.conditions is not None:
            cond = float(self.conditions.worst_error[load])
            if abs(cond) > abs(err):
                return cond, f"at {self.conditions.worst_name(load)}"
        return err, at

    def reasons(self, load: int) -> list[str]:
        """Why a load fails, in a designer's words (empty when it passes)."""
        tree, op = self.tree, self.op
        plan = tree.plan
        name = tree.loads[load]
        out = []
        if self.margin[load] < 0:
            d = self.deciding(load)
            ref = f" + reference {d['reference'] * 100:.3g} %" if d["reference"] else ""
            mm = f" + {d['k']:g}σ mismatch {d['k_sigma'] * 100:.3g} %" if d["k_sigma"] else ""
            top = d["terms"][0]
            # an operating point solved for verdicts only (detail=False) has no error terms:
            # then no term can be named, rather than the plan's own ratio term alone
            largest = (f"; largest term there: {top['label']} at {top['stage']} ({format_percent(top['value'])}"
                       f"{'; ' + top['note'] if 'note' in top else ''})" if op.b_factors else "")
            out.append(
                f"budget: error {format_percent(d['error'])}{mm}{ref} = {d['used'] * 100:.3g} % exceeds "
                f"±{d['tolerance'] * 100:.3g} % at {self.deciding_text(load, d)}{largest}"
            )
        conds = self.conditions
        at_nominal = " (nominal conditions)" if conds is not None else ""
        # a condition worse than nominal is named too, so the line carries the figure the table shows
        if conds is not None and conds.compliance[load] < min(0.0, float(self.compliance[load])):
            k = int(conds.compliance_index[load])
            out.append(f"compliance: the output device leaves its active region at {conds.columns.names[k]} "
                       f"({format_si(float(conds.compliance[load]), 'V')})")
        if self.compliance[load] < 0:
            case = int(self.compliance_case[load])
            branch = tree.l_branch[load]
            need = float(op.b_min_distance[branch, case])
            have = float(op.b_distance[branch, case])
            parent = tree.mirrors[tree.b_parent[branch]]
            v_node = float(plan.loads[name].v_range[case])
            # the node voltage is named when it is not the distance from the rail itself (sourcing outputs)
            node = f" at node {format_si(v_node, 'V')}" if abs(v_node - have) > 1e-9 * max(1.0, abs(have)) else ""
            if have - need <= op.b_internal_margin[branch, case]:
                out.append(
                    f"compliance: output of {parent} needs {format_si(need, 'V')} from its rail, "
                    f"has {format_si(have, 'V')}{node}{at_nominal}"
                )
            else:
                out.append(
                    f"compliance: a device inside {parent}'s output stack is "
                    f"{format_si(-float(op.b_internal_margin[branch, case]), 'V')} into its triode region{at_nominal}"
                )
        if np.any(self.delivered[load] <= 0):
            out.append("model: no positive current — the output is far outside its active region, so the "
                       "numbers above are extrapolations; fix the compliance first")
        up = int(self.upstream[load])
        if up >= 0:
            parent = tree.mirrors[tree.b_parent[up]]
            child = tree.mirrors[tree.b_child[up]]
            out.append(
                f"headroom: {parent} -> {child} output lacks {format_si(-float(op.b_compliance[up].min()), 'V')} "
                f"(the input of {child} leaves too little voltage for {parent}'s output device){at_nominal}"
            )
        if conds is not None and conds.headroom[load] < 0 and (up < 0 or conds.headroom[load] < -float(
                op.b_compliance[up].min())):
            out.append(f"headroom: a branch between mirrors on its path leaves its active region at "
                       f"{conds.columns.names[int(conds.headroom_index[load])]} "
                       f"(lacks {format_si(-float(conds.headroom[load]), 'V')})")
        if self.reference_headroom <= 0:
            out.append("headroom: the reference source has no voltage left (first mirror's input exceeds the supply)")
        return out

    @cached_property
    def hints(self) -> dict[int, list[str]]:
        """Computed topology hints for failing loads, when an advisor was given."""
        return self.advisor(self) if self.advisor is not None else {}

    @cached_property
    def regulation(self) -> tuple[Array, Array, Array]:
        """Load regulation over each load's voltage range: (ΔI in A, ΔI/I_nominal,
        ΔI/ΔV in A/V; 0 for a fixed voltage).  ΔI = I(max voltage) − I(min voltage).
        ΔI/I_nominal is 0 where the nominal current is exactly 0 (the model extrapolated
        to no current; the load's reasons say so, and ``analysis.plausible`` refuses a
        nonzero ΔI there)."""
        plan = self.tree.plan
        delta = self.delivered[:, 2] - self.delivered[:, 0]
        span = np.array([plan.loads[n].v_range[2] - plan.loads[n].v_range[0] for n in self.tree.loads])
        with np.errstate(invalid="ignore", divide="ignore"):
            per_volt = np.where(span > 0, delta / np.where(span > 0, span, 1.0), 0.0)
        nominal = self.delivered[:, 1]
        fraction = np.divide(delta, nominal, out=np.zeros_like(delta), where=nominal != 0)
        return delta, fraction, per_volt

    @cached_property
    def rout(self) -> Array:
        """Output resistance seen by each load at its nominal voltage, Ω."""
        return self.op.b_rout[self.tree.l_branch, 1]

    def floorplan_note(self, load: int) -> dict[str, Any] | None:
        """Gradient cost of a remote load (its output device far from its mirror)."""
        remote = self.op.columns.remote if self.op.columns is not None else None
        if remote is None:
            return None
        b = int(self.tree.l_branch[load])
        if not (remote.distance[b] or remote.delta_t[b] or remote.delta_v[b]):
            return None
        fp = self.tree.plan.floorplan
        term = float(self.op.b_factors["gradient"][b, 1] - 1.0) if "gradient" in self.op.b_factors else 0.0
        return {"distance": float(remote.distance[b]), "delta_t": float(remote.delta_t[b]),
                "delta_v": float(remote.delta_v[b]), "term": term, "long_line": bool(remote.distance[b] > fp.long_line)}

    def floorplan_text(self, load: int) -> str | None:
        note = self.floorplan_note(load)
        if note is None or not note["long_line"]:
            return None
        mirror = self.tree.mirrors[self.tree.b_parent[self.tree.l_branch[load]]]
        return (f"floorplan: {self.tree.loads[load]} shares {mirror}'s base/gate line over {note['distance'] * 1e3:.3g} mm "
                f"(ΔT {note['delta_t']:.3g} K, rail offset {note['delta_v'] * 1e3:.3g} mV): {format_percent(note['term'])}; "
                "routing the current from an output device beside the mirror would remove this term")

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
            "floorplan": self.floorplan_note(load),
            "conditions": None if self.conditions is None else {
                "worst_error": float(self.conditions.worst_error[load]),
                "at": self.conditions.worst_name(load),
                "compliance_margin": float(self.conditions.compliance[load]),
            },
            "mismatch": None if self.spread is None else {
                "sigma": float(self.sigma[load]),
                "k": self.k_sigma,
                "stages": [{"mirror": m, "sigma": s} for m, s in self.spread.stage_sigmas(load)],
            },
            "deciding": self.deciding(load),
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
            "matched": self.matched(),
        }

    def matched(self) -> list[dict[str, Any]]:
        """Each matched pair: nominal ratio error, first-order σ of the ratio, verdict."""
        tree, plan = self.tree, self.tree.plan
        out = []
        for name, group in plan.matched.items():
            a, b = (tree.loads.index(n) for n in group.loads)
            ideal = self.ideal[a] / self.ideal[b]
            error = float(self.delivered[a, 1] / self.delivered[b, 1] / ideal - 1.0)
            sigma = self.spread.ratio_sigma(a, b) if self.spread is not None else 0.0
            used = abs(error) + self.k_sigma * sigma
            out.append({"name": name, "loads": list(group.loads), "ratio_error": error, "sigma": sigma,
                        "k": self.k_sigma, "tolerance": group.tolerance,
                        "verdict": "pass" if used <= group.tolerance else "fail"})
        return out


def _finite_or_none(x: float) -> float | None:
    return x if np.isfinite(x) else None


def audit(op: OperatingPoint, conditions: Any = None, spread: Any = None, k_sigma: float | None = None) -> Audit:
    """Compare every load's current with its budget and explain the result.

    ``conditions`` (biastree.corners.evaluate) widens the error to the worst
    over the plan's temperatures, supplies and corners; ``spread``
    (biastree.spread.analytic) adds k·σ of mismatch to the budget's use.
    """
    tree = op.tree
    plan = tree.plan
    target = np.array([plan.loads[n].current for n in tree.loads], dtype=float)
    tolerance = np.array([plan.loads[n].tolerance for n in tree.loads], dtype=float)
    delivered = op.l_current
    error = delivered / target[:, None] - 1.0
    worst = np.argmax(np.abs(error), axis=1)
    worst_abs = np.abs(error[np.arange(len(target)), worst])
    ref_tol = plan.reference.tolerance
    k = plan.spread.k_sigma if k_sigma is None else k_sigma
    if conditions is not None:
        worst_abs = np.maximum(worst_abs, np.abs(conditions.worst_error))
    sigma = spread.mismatch if spread is not None else 0.0
    margin = tolerance - worst_abs - k * sigma - ref_tol

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
    if conditions is not None:
        passed &= (conditions.compliance >= 0) & (conditions.headroom >= 0)
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
        conditions=conditions,
        spread=spread,
        k_sigma=k,
    )


def _card_betas(tree: Any, op: OperatingPoint, case: int) -> dict[int, tuple[float, str]]:
    """(β, words) of the output device of every branch of a bipolar mirror whose device is
    a Gummel–Poon card, at its own current in column ``case``: with a card, β depends on
    each device's current (ISE/NE at low current, IKF at high current), so the "β loading"
    term says at which β it was taken.  β is I_C/I_B of one unit device at the output's
    collector current per unit device (V_CB = 0, the Early effect aside, as the term is
    defined: ``gummel_poon.beta_at``)."""
    from biastree.input.cards import CardModel
    from biastree.physics import gummel_poon

    plan = tree.plan
    card = np.array([bool(tree.m_bipolar[m]) and isinstance(plan.devices[plan.mirrors[n].device], CardModel)
                     for m, n in enumerate(tree.mirrors)], dtype=bool)
    gp = None if op.devices is None else op.devices.gp
    if gp is None or not card.any():
        return {}
    b = np.nonzero(card[tree.b_parent])[0]
    m = tree.b_parent[b]
    size = np.array([plan.mirrors[tree.mirrors[i]].input_size for i in m.tolist()]) * tree.b_ratio[b]
    p = gp.take((m, np.full(len(b), case)))
    ic = np.abs(op.b_current[b, case]) / size
    beta = gummel_poon.beta_at(ic, p)
    out = {}
    for i, bb in enumerate(b.tolist()):
        bf = float(p.bf[i])
        out[bb] = (float(beta[i]), f"β {beta[i]:.4g} at this output device's {format_si(float(ic[i]), 'A')} "
                                   f"per unit device, card BF {bf:.4g}: a card's β depends on each device's current")
    return out
