"""Annotated tree diagram as Graphviz DOT text (pure; no Graphviz needed).

Status is encoded twice so it survives grey print and colour-blind
readers: by colour (our own palette: blue-green for pass, vermilion for
fail) *and* by a text mark and border (``PASS`` in a single border,
``FAIL`` in a bold double border).  A legend sits on the diagram.
"""

from __future__ import annotations

from dataclasses import dataclass
from html import escape

import numpy as np

from biastree.analysis.audit import Audit
from biastree.errors import BiasTreeError
from biastree.output.columns import BY_KEY
from biastree.units import format_si, signed_percent

PASS_COLOUR, PASS_FILL = "#00796b", "#e0f2ef"
FAIL_COLOUR, FAIL_FILL = "#c0392b", "#fbe3df"
MIRROR_COLOUR, MIRROR_FILL = "#455a64", "#f3f5f6"
REF_COLOUR, REF_FILL = "#283593", "#e8eaf6"
PASS_MARK, FAIL_MARK = "PASS", "FAIL"
AUTO_NODE_LIMIT = 3000  # at most about this many nodes go to Graphviz (its layout time grows fast)
ROW_LIMIT = 80  # nodes in one column: about 80 × 60 pt, a tall but readable page when zoomed
ANNOTATIONS = ("current", "ratio", "error")


@dataclass(frozen=True)
class Diagram:
    """DOT text plus what a caller should tell the user about it."""

    text: str
    nodes: int
    notes: tuple[str, ...] = ()


def _q(name: str) -> str:
    """A DOT quoted string; a newline in ``name`` becomes a DOT line break."""
    return '"' + name.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


def _pct(x: float) -> str:
    return signed_percent(x, 2)


def _rows(title: str, lines: list[str], colour: str) -> str:
    cells = "".join(f'<TR><TD ALIGN="LEFT">{line}</TD></TR>' for line in lines)
    return (f'<<TABLE BORDER="0" CELLBORDER="0" CELLSPACING="0" CELLPADDING="1">'
            f'<TR><TD ALIGN="LEFT"><B><FONT COLOR="{colour}">{title}</FONT></B></TD></TR>{cells}</TABLE>>')


def to_dot(
    result: Audit,
    only_failing: bool = False,
    depth: int | None = None,
    annotate: str = "current",
    expand: bool = False,
    node_limit: int = AUTO_NODE_LIMIT,
    subtree: str | None = None,
    fit: bool = True,
    row_limit: int = ROW_LIMIT,
) -> Diagram:
    """The audited tree as DOT text (left to right).

    ``depth`` keeps that many mirror levels and sums up what lies below;
    ``only_failing`` keeps only the paths to failing loads; ``subtree`` keeps
    one mirror and what it feeds; ``expand`` draws each copy of a load branch
    (``count``) as its own node instead of one node marked ×N; ``annotate``
    puts the branch ``current``, the ``ratio`` or the cumulative ``error`` on
    the edges.

    ``fit`` keeps the drawing readable: when more than ``row_limit`` nodes
    would stand in one column (the diagram's height), each mirror's loads
    become one summary node, and if that is still too tall the tree is cut
    by depth.  Whatever ``fit`` says, at most about ``node_limit`` nodes are
    drawn.  ``notes`` say what was left out.
    """
    if annotate not in ANNOTATIONS:
        raise ValueError(f"annotate must be one of {', '.join(ANNOTATIONS)}")
    tree, op = result.tree, result.op
    plan = tree.plan
    n_m = len(tree.mirrors)
    notes: list[str] = []
    level = np.zeros(n_m, dtype=np.int64)
    for k, gen in enumerate(tree.generations):
        level[gen] = k + 1

    n_below, fail_below = _counts_below(result)
    m_fail = fail_below > 0  # mirrors on a path to a failing load
    failing = ~result.passed
    load_keep = failing if only_failing else np.ones(len(tree.loads), dtype=bool)
    m_keep = m_fail if only_failing else np.ones(n_m, dtype=bool)
    root = 0
    if subtree is not None:
        if subtree not in tree.mirrors:
            raise BiasTreeError(f"--subtree: no mirror named '{subtree}'")
        root = tree.mirrors.index(subtree)
        inside = np.zeros(n_m, dtype=bool)
        inside[root] = True
        for gen in tree.generations[1:]:
            inside[gen] = inside[tree.b_parent[tree.m_in_branch[gen]]] | (gen == root)
        m_keep = m_keep & inside
        m_keep[root] = True
        level = level - level[root] + 1

    copies = tree.b_count[tree.l_branch].astype(int) if expand else np.ones(len(tree.loads), dtype=int)
    copies = np.minimum(copies, 16)
    load_parent = tree.b_parent[tree.l_branch]
    child_parent = tree.b_parent[tree.m_in_branch[1:]] if n_m > 1 else np.zeros(0, dtype=np.int64)

    def size(limit_depth: int | None, grouped: bool) -> tuple[int, int]:
        """(nodes, rows) of a view: rows = nodes at the right-hand edge, i.e. the height."""
        keep = m_keep & (level >= 1) if limit_depth is None else m_keep & (level >= 1) & (level <= limit_depth)
        shown_loads = load_keep & keep[load_parent]
        if grouped:
            leaves = int(np.unique(load_parent[shown_loads]).size)
        else:
            leaves = int(copies[shown_loads].sum())
        cut = keep[child_parent] & ~keep[1:] & m_keep[1:] if n_m > 1 else np.zeros(0, dtype=bool)
        summaries = int(np.unique(child_parent[cut]).size)
        return 1 + int(keep.sum()) + leaves + summaries, leaves + summaries

    grouped = False
    full_nodes = size(depth, False)[0]
    depth_max = int(level[m_keep].max())
    if fit and depth is None and size(None, False)[1] > row_limit:
        grouped = True
        if size(None, True)[1] > row_limit:
            depth = 1
            while depth < depth_max and size(depth + 1, True)[1] <= row_limit:
                depth += 1
        notes.append(f"{full_nodes} nodes would be {size(None, False)[1]} rows tall: each mirror's loads are one "
                     "summary node" + (f", {depth} mirror level(s) shown" if depth is not None else "")
                     + " (--subtree NAME draws one part in full; the HTML report lists every load)")
    if size(depth, grouped)[0] > node_limit:
        if not grouped and size(depth, True)[0] <= node_limit:
            grouped = True
        else:
            grouped = True
            depth = 1
            while depth < depth_max and size(depth + 1, True)[0] <= node_limit:
                depth += 1
        notes.append(f"{full_nodes} nodes are too many to draw: loads summarised per mirror"
                     + (f", {depth} mirror level(s) shown" if depth is not None else "")
                     + " (use --subtree, --depth or --only-failing to choose)")
    shown = m_keep & (level >= 1) & ((level <= depth) if depth is not None else True)

    lines = [
        "digraph biastree {",
        '  graph [rankdir=LR, fontname="Helvetica", fontsize=11, nodesep=0.25, ranksep=0.6, '
        f'label={_q(_title(result, notes))}, labelloc=t, labeljust=l];',
        '  node [fontname="Helvetica", fontsize=10, shape=box, style="rounded,filled"];',
        '  edge [fontname="Helvetica", fontsize=9, arrowsize=0.7];',
    ]
    ref = plan.reference
    ref_rows = [f"{escape(format_si(ref.current, 'A'))} ±{ref.tolerance * 100:.3g}%",
                f"headroom {escape(format_si(result.reference_headroom, 'V'))}"]
    if root:
        above, m = [], root
        while tree.m_in_branch[m] >= 0:
            m = int(tree.b_parent[tree.m_in_branch[m]])
            above.insert(0, tree.mirrors[m])
        ref_rows.append("via " + escape(" › ".join(above)))
    lines.append(
        f'  reference [shape=box, style="filled", color="{REF_COLOUR}", fillcolor="{REF_FILL}", label='
        + _rows("reference", ref_rows, REF_COLOUR) + "];"
    )
    edge_error = _edge_errors(result) if annotate == "error" else None
    # mirrors
    for m in np.flatnonzero(shown):
        name = tree.mirrors[m]
        spec = plan.mirrors[name]
        up = tree.m_in_branch[m]
        headroom_bad = up >= 0 and op.b_compliance[up].min() < 0
        colour = FAIL_COLOUR if headroom_bad else MIRROR_COLOUR
        rows = [
            f"{escape(spec.device)} ({plan.devices[spec.device].kind}), {escape(spec.topology)}",
            f"in {escape(format_si(op.m_i_in[m, 1], 'A', 4))}, fan-out {tree.m_fanout[m]:.4g}",
        ]
        if tree.m_mult[m] > 1:
            rows.append(f"×{tree.m_mult[m]:g} copies")
        if headroom_bad:
            rows.append(f"<B>{FAIL_MARK}: headroom {escape(format_si(float(op.b_compliance[up].min()), 'V'))}</B>")
        lines.append(f'  {_q("m:" + name)} [color="{colour}", fillcolor="{MIRROR_FILL}", '
                     f'penwidth={2.5 if headroom_bad else 1}, label={_rows(escape(name), rows, colour)}];')
    # edges and loads
    ref_child = tree.mirrors[root]
    feed = format_si(ref.current if not root else float(op.m_i_in[root, 1]), "A")
    lines.append(f'  reference -> {_q("m:" + ref_child)} [label={_q(feed)}{", style=dashed" if root else ""}];')
    hidden: dict[int, list[int]] = {}
    groups: dict[int, list[int]] = {}
    for b in range(len(tree.b_parent)):
        parent = int(tree.b_parent[b])
        if not shown[parent]:
            continue
        label = _edge_label(result, b, annotate, edge_error)
        if tree.b_to_load[b]:
            i = int(tree.b_child[b])
            if not load_keep[i]:
                continue
            if grouped:
                groups.setdefault(parent, []).append(i)
                continue
            ok = bool(result.passed[i])
            colour = PASS_COLOUR if ok else FAIL_COLOUR
            node_lines = _load_rows(result, i)
            n_copies = int(copies[i])
            for c in range(n_copies):
                node = f"l:{tree.loads[i]}" + (f"#{c + 1}" if n_copies > 1 else "")
                title = escape(tree.loads[i]) + ("" if expand else f" ×{int(tree.l_mult[i])}" if tree.l_mult[i] > 1 else "")
                if n_copies > 1:
                    title = f"{escape(tree.loads[i])} [{c + 1}/{int(tree.b_count[b])}]"
                lines.append(
                    f'  {_q(node)} [color="{colour}", fillcolor="{PASS_FILL if ok else FAIL_FILL}", '
                    f'penwidth={1 if ok else 2.5}, peripheries={1 if ok else 2}, '
                    f'label={_rows(title, node_lines, colour)}];'
                )
                lines.append(f'  {_q("m:" + tree.mirrors[parent])} -> {_q(node)} '
                             f'[label={_q(label)}, color="{colour if not ok else "#607d8b"}", '
                             f'penwidth={2 if not ok else 1}];')
            if expand and tree.b_count[b] > n_copies:
                notes.append(f"{tree.loads[i]}: {int(tree.b_count[b])} copies, first {n_copies} drawn")
        else:
            child = int(tree.b_child[b])
            if shown[child]:
                bad = bool(m_fail[child])
                lines.append(f'  {_q("m:" + tree.mirrors[parent])} -> {_q("m:" + tree.mirrors[child])} '
                             f'[label={_q(label)}, color="{FAIL_COLOUR if bad else "#607d8b"}", '
                             f'penwidth={2 if bad else 1}];')
            elif m_keep[child]:
                hidden.setdefault(parent, []).append(child)
    for parent, members in groups.items():
        lines += _load_group(result, parent, members)
    # summaries of what a depth cut hides
    for parent, children in hidden.items():
        n_loads = int(sum(n_below[c] for c in children))
        n_fail = int(sum(fail_below[c] for c in children))
        node = f"more:{tree.mirrors[parent]}"
        colour = FAIL_COLOUR if n_fail else PASS_COLOUR
        mark = f"{FAIL_MARK}: {n_fail}" if n_fail else PASS_MARK
        text = f"{len(children)} mirror(s), {n_loads} load(s) below\n{mark}"
        lines.append(f'  {_q(node)} [shape=folder, style="filled", color="{colour}", fillcolor="white", '
                     f"label={_q(text)}];")
        lines.append(f'  {_q("m:" + tree.mirrors[parent])} -> {_q(node)} [style=dashed, color="#90a4ae"];')
    lines += _legend()
    lines.append("}")
    text = "\n".join(lines) + "\n"
    nodes = sum(1 for line in lines if line.startswith('  "') and " -> " not in line) + 1
    return Diagram(text, nodes, tuple(notes))


def _load_group(result: Audit, parent: int, members: list[int]) -> list[str]:
    """One node for a mirror's loads: how many, how many fail, the smallest margin."""
    tree = result.tree
    fails = [i for i in members if not result.passed[i]]
    worst = min(members, key=lambda i: float(result.margin[i]))
    colour = FAIL_COLOUR if fails else PASS_COLOUR
    rows = [f"{int(tree.l_mult[members].sum())} instances",
            f"smallest margin {_pct(result.margin[worst])} ({escape(tree.loads[worst])})",
            f"<B>{FAIL_MARK}: {len(fails)}</B>" if fails else f"<B>{PASS_MARK}</B>"]
    node = _q(f"loads:{tree.mirrors[parent]}")
    return [f'  {node} [shape=note, color="{colour}", fillcolor="{FAIL_FILL if fails else PASS_FILL}", '
            f'penwidth={2.5 if fails else 1}, peripheries={2 if fails else 1}, '
            f'label={_rows(f"{len(members)} loads", rows, colour)}];',
            f'  {_q("m:" + tree.mirrors[parent])} -> {node} [color="{colour if fails else "#607d8b"}"];']


def _title(result: Audit, notes: list[str]) -> str:
    s = result.summary()
    plan = result.tree.plan
    head = (f"{plan.title or 'bias tree'} — {s['passed']} of {s['loads']} loads pass"
            + (f", {s['failed']} FAIL" if s["failed"] else "")
            + f" — {plan.supply:g} V, {plan.temperature - 273.15:.4g} °C — design estimates")
    return head + "".join(f"\n{n}" for n in notes)


def _range_text(result: Audit, i: int) -> str:
    """' (low..high)' of the error over the voltage range, when it shows as a range at all."""
    span = BY_KEY["error_range"].value(result, i)  # the tables' low..high range
    if not isinstance(span, tuple) or _pct(span[0]) == _pct(span[1]):
        return ""
    return f" ({_pct(span[0])}..{_pct(span[1])})"


def _load_rows(result: Audit, i: int) -> list[str]:
    ok = bool(result.passed[i])
    rows = [
        f"target {escape(format_si(result.target[i], 'A'))}",
        f"delivered {escape(format_si(result.delivered[i, 1], 'A', 4))}",
        f"error {_pct(result.error[i, 1])}" + _range_text(result, i),
        f"budget ±{result.tolerance[i] * 100:.3g}%, margin {_pct(result.margin[i])}",
        f"compliance {escape(format_si(result.worst_compliance[i], 'V'))}",
    ]
    if ok:
        rows.append(f"<B>{PASS_MARK}</B>")
    else:
        why = []
        if result.margin[i] < 0:
            # the case that decides the verdict, not the nominal one (they differ with conditions)
            d = result.deciding(i)
            extra = "".join(f" + {name} {abs(d[key]) * 100:.3g}%" for name, key in (("kσ", "k_sigma"), ("ref.", "reference"))
                            if d.get(key))
            rows.append(f"decides: {_pct(d['error'])}{extra} = {d['used'] * 100:.3g}%")
            rows.append(f"at {escape(result.deciding_text(i, d))}")
            stage, label, value = result.largest_term(i)
            why.append(f"budget ({escape(label)} at {escape(stage)} {_pct(value)})")
        if result.worst_compliance[i] < 0:
            why.append("compliance")
        if result.upstream[i] >= 0 or result.reference_headroom <= 0:
            why.append("headroom")
        rows.append(f"<B>{FAIL_MARK}: {', '.join(why)}</B>")
    return rows


def _edge_errors(result: Audit) -> np.ndarray:
    """Cumulative error (vs ideal ratios) of the current on every branch."""
    tree, op = result.tree, result.op
    ideal = np.zeros(len(tree.mirrors))
    ideal[tree.generations[0]] = op.i_ref[1]
    for gen in tree.generations[1:]:
        b = tree.m_in_branch[gen]
        ideal[gen] = ideal[tree.b_parent[b]] * tree.b_ratio[b]
    return op.b_current[:, 1] / (ideal[tree.b_parent] * tree.b_ratio) - 1.0


def _edge_label(result: Audit, b: int, annotate: str, errors: np.ndarray | None) -> str:
    tree, op = result.tree, result.op
    ratio = f"{tree.b_ratio[b]:g}" + (f" × {int(tree.b_count[b])}" if tree.b_count[b] > 1 else "")
    if annotate == "ratio":
        return ratio
    if annotate == "error" and errors is not None:
        return _pct(float(errors[b]))
    return f"{ratio}: {format_si(op.b_current[b, 1], 'A', 4)}"


def _counts_below(result: Audit) -> tuple[np.ndarray, np.ndarray]:
    """Loads and failing loads in each mirror's subtree (bottom-up sums)."""
    tree = result.tree
    n = np.zeros(len(tree.mirrors), dtype=np.int64)
    fails = np.zeros(len(tree.mirrors), dtype=np.int64)
    parents = tree.b_parent[tree.l_branch]
    np.add.at(n, parents, 1)
    np.add.at(fails, parents, (~result.passed).astype(np.int64))
    for gen in reversed(tree.generations[1:]):
        up = tree.b_parent[tree.m_in_branch[gen]]
        np.add.at(n, up, n[gen])
        np.add.at(fails, up, fails[gen])
    return n, fails


def _legend() -> list[str]:
    return [
        "  subgraph cluster_legend {",
        '    label="legend"; fontsize=10; color="#b0bec5"; style="rounded";',
        f'    legend_pass [label="load inside budget\\n{PASS_MARK}", color="{PASS_COLOUR}", fillcolor="{PASS_FILL}"];',
        f'    legend_fail [label="load out of budget\\n{FAIL_MARK} (double border)", color="{FAIL_COLOUR}", '
        f'fillcolor="{FAIL_FILL}", penwidth=2.5, peripheries=2];',
        f'    legend_mirror [label="mirror\\n(device, topology, input)", color="{MIRROR_COLOUR}", fillcolor="{MIRROR_FILL}"];',
        "    legend_pass -> legend_fail -> legend_mirror [style=invis];",
        "  }",
    ]
