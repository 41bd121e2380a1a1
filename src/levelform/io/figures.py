"""PNG figures of a result: the design over its domain and the history."""
from __future__ import annotations

import io

import numpy as np
from shapely.geometry import Point, Polygon

from ..geometry.shapes import domain_polygon, polygon_parts
from ..spec import CAUTION, Result
from .scene import coordinate_rings, drawing_inputs, length_unit, unit_vector

# Our own restrained palette.
COLOR_MATERIAL = "#2f3e46"
COLOR_DOMAIN = "#8d99ae"
COLOR_DOMAIN_FILL = "#f4f5f7"
COLOR_KEEP_SOLID = "#52796f"
COLOR_KEEP_EMPTY = "#b08968"
COLOR_SUPPORT = "#386641"
COLOR_LOAD = "#bc4749"
# One arrow colour per load case when a problem has several (each load is then labelled too).
COLOR_CASES = (COLOR_LOAD, "#1d6fa5", "#c77d0a", "#6a4c93", "#2a9d8f", "#7f5539")


def support_glyphs(support, s: float, domain: Polygon):
    """Marker geometry of one support in model coordinates.

    Returns ``(closed, open, label)``: closed polylines, open polylines (each an (n, 2)
    array) and a label anchor (point, text) or None. A point support is a triangle whose
    apex sits on the point and whose base faces the restrained direction ("x": base to
    the left, otherwise below); a single-direction support adds a roller line, "xy" adds
    ground ticks. Segments and boxes get a wall with ticks on the side outside the domain.
    """
    closed, lines, label = [], [], None
    fix = support.fix
    if support.kind == "point":
        p = np.asarray(support.where, dtype=float)
        n = np.array([-1.0, 0.0]) if fix == "x" else np.array([0.0, -1.0])
        t = np.array([-n[1], n[0]])
        closed.append(np.array([p, p + s * n + 0.6 * s * t, p + s * n - 0.6 * s * t]))
        if fix in ("x", "y"):
            off = p + 1.3 * s * n
            lines.append(np.array([off + 0.8 * s * t, off - 0.8 * s * t]))
        else:
            base = p + s * n
            k = np.linspace(-0.6, 0.6, 5)[:, None]
            starts = base + k * s * t
            ends = starts + 0.35 * s * (n - t)
            lines.extend(np.stack([starts, ends], axis=1))
        return closed, lines, label
    if support.kind == "segment":
        a, b = (np.asarray(q, dtype=float) for q in support.where)
        walls = [(a, b)]
        lines.append(np.array([a, b]))
        label = ((a + b) / 2.0, f"fix {fix}")
    elif support.kind == "box":
        x0, y0, x1, y1 = (float(v) for v in support.where)
        corners = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]])
        closed.append(corners)
        walls = []
        label = (np.array([(x0 + x1) / 2, (y0 + y1) / 2]), f"fix {fix}")
        return closed, lines, label
    else:
        return closed, lines, label
    for a, b in walls:
        d = unit_vector(b - a)
        if d is None:
            continue
        nrm = np.array([-d[1], d[0]])
        mid = (a + b) / 2.0
        if domain.contains(Point(*(mid + 0.5 * s * nrm))):
            nrm = -nrm  # ticks go on the side away from the material
        length = float(np.hypot(*(b - a)))
        count = int(min(max(length / (0.5 * s), 3), 60))
        starts = a + np.linspace(0.0, 1.0, count)[:, None] * (b - a)
        ends = starts + 0.5 * s * (nrm - d)
        lines.extend(np.stack([starts, ends], axis=1))
    return closed, lines, label


def load_arrows(load, length: float):
    """Arrows of one load as (tails, heads) arrays; heads touch the loaded points.

    A segment load gets a row of arrows along the segment. Arrows show direction only.
    """
    d = unit_vector(load.force)
    if d is None:
        return np.zeros((0, 2)), np.zeros((0, 2))
    if load.kind == "segment":
        a, b = (np.asarray(q, dtype=float) for q in load.where)
        seg = float(np.hypot(*(b - a)))
        count = int(min(max(round(seg / (0.4 * length)) + 1, 3), 15))
        heads = a + np.linspace(0.0, 1.0, count)[:, None] * (b - a)
    else:
        heads = np.asarray(load.where, dtype=float).reshape(1, 2)
    return heads - length * d, heads


# --------------------------------------------------------------------------- figures

def new_figure(width: float, height: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    return fig


def png_bytes(fig, dpi: int = 150) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def polygon_path(polys):
    from matplotlib.path import Path as MplPath

    verts, codes = [], []
    for poly in polys:
        for ring in coordinate_rings(poly):
            pts = ring[:, :2]
            verts.append(pts)
            c = np.full(len(pts), MplPath.LINETO, dtype=np.uint8)
            c[0] = MplPath.MOVETO
            c[-1] = MplPath.CLOSEPOLY
            codes.append(c)
    if not verts:
        return None
    return MplPath(np.concatenate(verts), np.concatenate(codes))


def design_png(result: Result) -> bytes:
    """Picture of the design: material over the domain, hatched keep regions, support
    markers, load arrows (direction only), caution line at the bottom; PNG bytes of
    :func:`design_figure`."""
    return png_bytes(design_figure(result))


def _case_colors(problem) -> dict:
    """Arrow colour of each load case: all alike for one case, one each for several."""
    names = [c.name for c in problem.cases] or sorted({ld.case for ld in problem.loads})
    return {n: COLOR_CASES[k % len(COLOR_CASES)] for k, n in enumerate(names)}


def design_figure(result: Result):
    """The matplotlib Figure of :func:`design_png`. When the problem has several load
    cases, each case's arrows get their own colour, each load is labelled with its case
    name at the tail of its arrow, and the legend lists the cases."""
    from matplotlib.collections import LineCollection
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch, PathPatch
    from matplotlib.patches import Polygon as MplPolygon

    domain, material, solid, empty, size = drawing_inputs(result)
    problem = result.problem
    unit = length_unit(problem)
    minx, miny, maxx, maxy = domain.bounds
    w, h = max(maxx - minx, 1e-12), max(maxy - miny, 1e-12)
    fig_w = 8.0
    fig_h = min(max(fig_w * 0.75 * h / w + 1.4, 3.0), 10.0)
    fig = new_figure(fig_w, fig_h)
    ax = fig.add_axes((0.08, 0.14, 0.68, 0.78))
    s = 0.03 * size

    ax.add_patch(PathPatch(polygon_path([domain]), facecolor=COLOR_DOMAIN_FILL,
                           edgecolor=COLOR_DOMAIN, lw=0.8, zorder=1))
    mp = polygon_path(material)
    if mp is not None:
        ax.add_patch(PathPatch(mp, facecolor=COLOR_MATERIAL, edgecolor="none", zorder=2))
    for geom, color, hatch in ((solid, COLOR_KEEP_SOLID, "////"),
                               (empty, COLOR_KEEP_EMPTY, "xxx")):
        p = polygon_path(polygon_parts(geom))
        if p is not None:
            ax.add_patch(PathPatch(p, facecolor="none", edgecolor=color, hatch=hatch,
                                   lw=0.8, zorder=3))

    sup_lines = []
    for sup in problem.supports:
        closed, opens, label = support_glyphs(sup, s, domain)
        for c in closed:
            filled = sup.fix == "xy" and sup.kind == "point"
            ax.add_patch(MplPolygon(c, closed=True, zorder=4, lw=1.0,
                                    edgecolor=COLOR_SUPPORT,
                                    facecolor=(COLOR_SUPPORT if filled else
                                               "white" if sup.kind == "point" else "none"),
                                    hatch=None if sup.kind == "point" else "\\\\\\"))
        sup_lines.extend(opens)
        if label is not None:
            (lx, ly), text = label
            ax.annotate(text, (lx, ly), xytext=(3, 3), textcoords="offset points",
                        fontsize=7, color=COLOR_SUPPORT, zorder=6,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none",
                              "alpha": 0.8})
    if sup_lines:
        ax.add_collection(LineCollection(sup_lines, colors=COLOR_SUPPORT, lw=1.0, zorder=4))

    arrow_len = 3.5 * s
    colors = _case_colors(problem)
    several = len(colors) > 1
    arrows: dict = {}  # case name -> (tails, heads)
    for load in problem.loads:
        color = colors.get(load.case, COLOR_LOAD) if several else COLOR_LOAD
        t, hd = load_arrows(load, arrow_len)
        tails, heads = arrows.setdefault(load.case if several else None, ([], []))
        tails.append(t)
        heads.append(hd)
        if load.kind == "segment":
            seg = np.asarray(load.where, dtype=float)
            ax.plot(seg[:, 0], seg[:, 1], color=color, lw=1.2, zorder=5)
        if several and len(t):
            k = len(t) // 2  # the middle arrow of a row
            ax.annotate(str(load.case), tuple(t[k]), xytext=(0, 0), textcoords="offset points",
                        ha="center", va="center", fontsize=7, color=color, zorder=7,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": color,
                              "lw": 0.6, "alpha": 0.9})
    for case, (tails, heads) in arrows.items():
        t = np.concatenate(tails)
        hd = np.concatenate(heads)
        if len(t):
            d = hd - t
            ax.quiver(t[:, 0], t[:, 1], d[:, 0], d[:, 1], angles="xy", scale_units="xy",
                      scale=1.0, color=colors.get(case, COLOR_LOAD) if several else COLOR_LOAD,
                      width=0.004, zorder=5)
            allpts = np.concatenate([t, hd])
            minx, miny = min(minx, allpts[:, 0].min()), min(miny, allpts[:, 1].min())
            maxx, maxy = max(maxx, allpts[:, 0].max()), max(maxy, allpts[:, 1].max())

    pad = 2.0 * s
    ax.set_xlim(minx - pad, maxx + pad)
    ax.set_ylim(miny - pad, maxy + pad)
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel(f"x [{unit}]")
    ax.set_ylabel(f"y [{unit}]")
    ax.set_title(f"{problem.name}: material fraction {result.material_fraction:.3f}",
                 fontsize=10)
    handles = [Patch(facecolor=COLOR_MATERIAL, label="material"),
               Patch(facecolor="none", edgecolor=COLOR_DOMAIN, label="domain")]
    if not solid.is_empty:
        handles.append(Patch(facecolor="none", edgecolor=COLOR_KEEP_SOLID, hatch="////",
                             label="keep solid"))
    if not empty.is_empty:
        handles.append(Patch(facecolor="none", edgecolor=COLOR_KEEP_EMPTY, hatch="xxx",
                             label="keep empty"))
    if problem.supports:
        handles.append(Line2D([], [], color=COLOR_SUPPORT, marker="^", ls="none",
                              label="support"))
    if problem.loads and several:
        used = {ld.case for ld in problem.loads}
        handles.extend(Line2D([], [], color=color, marker=r"$\rightarrow$", ls="none",
                              markersize=10, label=f"load, case {name}")
                       for name, color in colors.items() if name in used)
    elif problem.loads:
        handles.append(Line2D([], [], color=COLOR_LOAD, marker=r"$\rightarrow$", ls="none",
                              markersize=10, label="load (direction)"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), fontsize=8,
              frameon=False)
    fig.text(0.5, 0.015, CAUTION, ha="center", va="bottom", fontsize=7, color="#5c677d")
    return fig


def _fit_axes(fig, axes, bottom: float = 0.0, margin: float = 0.01, rounds: int = 4) -> None:
    """Shrink ``axes`` (which share one position, e.g. an axes and its twin) until their
    tick labels, offset texts, axis labels and title lie inside the figure, above
    ``bottom`` (a figure fraction), with ``margin`` to spare. Measured on the rendered
    figure, so long tick labels (0.0001025, or 1e6 with an offset) never push the y label
    off the figure. Axes that already fit are left where they are."""
    from matplotlib.transforms import Bbox

    renderer = fig.canvas.get_renderer()
    to_fig = fig.transFigure.inverted()
    for _ in range(rounds):
        bb = Bbox.union([ax.get_tightbbox(renderer) for ax in axes]).transformed(to_fig)
        left = max(0.0, margin - bb.x0)
        right = max(0.0, bb.x1 - (1.0 - margin))
        low = max(0.0, bottom + margin - bb.y0)
        top = max(0.0, bb.y1 - (1.0 - margin))
        if max(left, right, low, top) <= 1e-4:
            return
        pos = axes[0].get_position()
        new = Bbox.from_extents(pos.x0 + left, pos.y0 + low, pos.x1 - right, pos.y1 - top)
        if new.width <= 0.2 * pos.width or new.height <= 0.2 * pos.height:
            return  # labels larger than the figure: leave the axes usable
        for ax in axes:
            ax.set_position(new)


def history_png(result: Result) -> bytes:
    """Compliance (log scale if it spans more than 10x) and material fraction with its
    target against iteration, as PNG bytes (see :func:`history_figure`)."""
    return png_bytes(history_figure(result))


def history_figure(result: Result):
    """The matplotlib Figure of :func:`history_png`: compliance on the left axis, material
    fraction and its target on the right one, the caution line at the bottom. The axes are
    shrunk as far as their rendered labels need, so nothing is clipped."""
    fig = new_figure(7.0, 4.2)
    ax = fig.add_axes((0.11, 0.16, 0.75, 0.74))
    axes = [ax]
    hist = result.history
    units = result.problem.units
    if not hist:
        ax.text(0.5, 0.5, "no iterations recorded", ha="center", va="center",
                transform=ax.transAxes)
    else:
        it = np.array([r.iteration for r in hist], dtype=float)
        comp = np.array([r.compliance for r in hist], dtype=float)
        frac = np.array([r.material_fraction for r in hist], dtype=float)
        target = np.array([r.target_fraction for r in hist], dtype=float)
        ax.plot(it, comp, color=COLOR_MATERIAL, lw=1.4, label="compliance")
        good = comp[np.isfinite(comp) & (comp > 0)]
        if good.size and good.max() > 10.0 * good.min():
            ax.set_yscale("log")
        ax2 = ax.twinx()
        axes.append(ax2)
        ax2.plot(it, frac, color=COLOR_KEEP_SOLID, lw=1.2, label="material fraction")
        ax2.plot(it, target, color=COLOR_DOMAIN, lw=1.0, ls="--", label="target fraction")
        ax2.set_ylabel("material fraction")
        ax2.set_ylim(0.0, 1.05)
        lines = ax.get_lines() + ax2.get_lines()
        ax.legend(lines, [ln.get_label() for ln in lines], loc="upper right", fontsize=8)
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_xlabel("iteration")
    ax.set_ylabel(f"compliance [{units.compliance}]")
    ax.set_title(f"{result.problem.name}: convergence history", fontsize=10)
    caution = fig.text(0.5, 0.015, CAUTION, ha="center", va="bottom", fontsize=7, color="#5c677d")
    top_of_caution = caution.get_window_extent(fig.canvas.get_renderer()).transformed(
        fig.transFigure.inverted()).y1
    _fit_axes(fig, axes, bottom=top_of_caution)
    return fig


def comparison_png(comparison) -> bytes:
    """Side by side, one panel per method: the crisp outline over the domain, titled with
    the method and its crisp compliance; the caution line at the bottom."""
    from matplotlib.patches import PathPatch

    problem = comparison.problem
    domain = domain_polygon(problem)
    minx, miny, maxx, maxy = domain.bounds
    w, h = max(maxx - minx, 1e-12), max(maxy - miny, 1e-12)
    n = len(comparison.methods)
    # Sizes in inches: a panel at most 4 wide and 4.5 tall (at least 2.6 wide, room for
    # the title), then side margin, gap, title band and caution band.
    panel_w = min(4.0, max(2.6, 4.5 * w / h))
    panel_h = min(max(panel_w * h / w, 1.2), 6.0)
    side, gap, top, foot = 0.2, 0.15, 0.75, 0.45
    fig_w, fig_h = panel_w * n + gap * (n - 1) + 2 * side, panel_h + top + foot
    fig = new_figure(fig_w, fig_h)
    unit = problem.units.compliance
    pad = 0.03 * max(w, h)
    for k, m in enumerate(comparison.methods):
        ax = fig.add_axes(((side + k * (panel_w + gap)) / fig_w, foot / fig_h,
                           panel_w / fig_w, panel_h / fig_h))
        ax.add_patch(PathPatch(polygon_path([domain]), facecolor=COLOR_DOMAIN_FILL,
                               edgecolor=COLOR_DOMAIN, lw=0.8, zorder=1))
        mp = polygon_path(polygon_parts(comparison.results[m].outline))
        if mp is not None:
            ax.add_patch(PathPatch(mp, facecolor=COLOR_MATERIAL, edgecolor="none", zorder=2))
        ax.set_xlim(minx - pad, maxx + pad)
        ax.set_ylim(miny - pad, maxy + pad)
        ax.set_aspect("equal", adjustable="box")
        ax.set_xticks([])
        ax.set_yticks([])
        for spine in ax.spines.values():
            spine.set_visible(False)
        row = comparison.rows[m]
        ax.set_title(f"{m}\ncrisp compliance {row['crisp_compliance']:.5g} {unit}\n"
                     f"material {row['material_fraction']:.3f}", fontsize=9)
    fig.text(0.5, 0.05 / fig_h, "Crisp outlines analysed alike on one grid. " + CAUTION,
             ha="center", va="bottom", fontsize=6.5, color="#5c677d", wrap=True)
    return png_bytes(fig, dpi=120)
