"""Render DOT text with the Graphviz ``dot`` program (through the
``graphviz`` Python package, imported only here)."""

from __future__ import annotations

from biastree.errors import RenderError

FORMATS = ("svg", "png", "pdf")
PNG_NODE_LIMIT = 400  # a PNG of a wider tree is unreadable at any sane size
RENDER_NODE_LIMIT = 6000  # Graphviz's layout time grows fast: refuse more than this
MAX_HEIGHT_PT = 7200.0  # 100 inches: taller than this is not read, only scrolled

INSTALL_HINT = (
    "the Graphviz `dot` program is not installed: install it (Debian/Ubuntu: apt-get install graphviz); "
    "DOT output works without it (-o tree.dot)"
)


def render(dot_text: str, fmt: str, nodes: int = 0) -> bytes:
    """Run ``dot -T<fmt>`` on the text and return the rendered bytes."""
    if fmt not in FORMATS:
        raise RenderError(f"cannot render '{fmt}': choose one of {', '.join(FORMATS)} (or .dot)")
    if fmt == "png" and nodes > PNG_NODE_LIMIT:
        raise RenderError(
            f"a PNG of {nodes} nodes would be unreadable: write .svg or .pdf, or cut the tree with --depth / --only-failing"
        )
    if nodes > RENDER_NODE_LIMIT:
        raise RenderError(f"{nodes} nodes are too many to lay out: cut the tree (--subtree, --depth, --only-failing)")
    try:
        import graphviz
    except ImportError:
        raise RenderError("the `graphviz` Python package is missing: pip install graphviz") from None
    try:
        return graphviz.Source(dot_text).pipe(format=fmt)
    except graphviz.ExecutableNotFound:
        raise RenderError(INSTALL_HINT) from None
    except graphviz.CalledProcessError as exc:
        detail = (exc.stderr or b"").decode("utf-8", "replace").strip().splitlines()
        raise RenderError(f"dot failed: {detail[0] if detail else exc}") from None


def svg_body(svg: bytes) -> str:
    """SVG text without the XML prolog and DOCTYPE, for inlining into HTML."""
    text = svg.decode("utf-8")
    start = text.find("<svg")
    return text[start:] if start >= 0 else text


def height_note(svg: bytes) -> str | None:
    """A note when a rendered SVG is taller than ``MAX_HEIGHT_PT`` (else ``None``)."""
    import re

    head = svg[:4000].decode("utf-8", "replace")
    match = re.search(r'<svg[^>]*\bheight="([\d.]+)pt"', head)
    if not match or float(match.group(1)) <= MAX_HEIGHT_PT:
        return None
    return (f"the diagram is {float(match.group(1)):.0f} pt tall (over {MAX_HEIGHT_PT:.0f} pt): "
            "cut it with --depth or --subtree NAME to read it without scrolling")
