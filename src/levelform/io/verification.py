"""What a body-fitted check writes: verify.json, the stress map and a VTK file."""
from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np

from ..bodyfitted.check import Verification
from ..spec import CAUTION, Problem

FILES = ("verify.json", "stress.png", "verify.vtu")
# Pad outlines on the stress map: light, to stand out on the dark low-stress colours.
COLOR_PAD = "#f4a261"


# --------------------------------------------------------------------------- writing

def verification_record(v: Verification, problem: Problem) -> dict:
    """What verify.json holds: every figure of ``v``, the units and the caution."""
    from .atomic import jsonable
    from .export import software_record, units_record

    units = problem.units
    data = v.summary()
    data.update({
        "units": units_record(units),
        "problem": {"name": problem.name, "source": problem.source},
        "element": "quadratic triangle (6 nodes)" if v.order == 2 else "linear triangle (3 nodes)",
        "analysis": "linear elastic, plane stress, body-fitted mesh of the exported outline",
        "software": software_record(),
        "caution": CAUTION,
    })
    return jsonable(data)


def _sub_triangles(v: Verification) -> np.ndarray:
    """Linear triangles for drawing: each 6-node triangle split into four."""
    t = v.triangles
    if t.shape[1] == 3:
        return t
    return np.concatenate([t[:, [0, 3, 5]], t[:, [3, 1, 4]], t[:, [5, 4, 2]], t[:, [3, 4, 5]]])


def stress_png(v: Verification, problem: Problem) -> bytes:
    """Von Mises stress (envelope over load cases) over the mesh, the peak marked, the
    caution line at the bottom; PNG bytes of :func:`stress_figure`."""
    from .figures import png_bytes

    return png_bytes(stress_figure(v, problem))


def stress_figure(v: Verification, problem: Problem):
    """The matplotlib Figure of :func:`stress_png`.

    With several load cases the map shows, at every node, the largest von Mises stress of
    any case, and the title says so ("von Mises, envelope over load cases a, b"). Padded
    point supports are outlined and named "support pad" in the legend: their held disk
    carries little stress and would otherwise read as a bolt hole.
    """
    from matplotlib.tri import Triangulation

    from ..bodyfitted.mesh import pad_polygon
    from ..fem.model import resolve_settings, uses_pad
    from .figures import COLOR_DOMAIN, new_figure

    units = problem.units
    xy = v.points
    minx, miny = xy.min(axis=0)
    maxx, maxy = xy.max(axis=0)
    w, h = max(maxx - minx, 1e-12), max(maxy - miny, 1e-12)
    fig_w = 8.0
    fig_h = min(max(fig_w * 0.8 * h / w + 1.5, 3.2), 10.0)
    fig = new_figure(fig_w, fig_h)
    ax = fig.add_axes((0.08, 0.15, 0.74, 0.75))
    settings = resolve_settings(problem)
    pads = [s for s in problem.supports if s.kind == "point" and uses_pad(s, settings)]
    # With pads to name, the colour bar makes room below it for the legend.
    cax = fig.add_axes((0.85, 0.36, 0.025, 0.54) if pads else (0.85, 0.15, 0.025, 0.75))
    tri = Triangulation(xy[:, 0], xy[:, 1], _sub_triangles(v))
    art = ax.tripcolor(tri, v.von_mises, shading="gouraud", cmap="cividis", rasterized=True)
    cb = fig.colorbar(art, cax=cax)
    names = tuple(v.case_names)
    envelope = len(names) > 1
    cb.set_label(f"von Mises stress [{units.stress}]" + ("\nenvelope over load cases" if envelope else ""))
    handles = []
    for k, sup in enumerate(pads):
        ring = np.asarray(pad_polygon(sup.where, settings, v.mesh_size).exterior.coords)
        (line,) = ax.plot(ring[:, 0], ring[:, 1], color=COLOR_PAD, lw=1.3, ls="--", zorder=4,
                          label="support pad (held)" if k == 0 else "_nolegend_")
        if k == 0:
            handles.append(line)
    if v.max_von_mises_at is not None:
        px, py = v.max_von_mises_at
        (mark,) = ax.plot([px], [py], marker="o", ms=7, mfc="none", mec="#d62828", mew=1.8, ls="none",
                          zorder=5, label="peak von Mises")
        if handles:
            handles.append(mark)
        in_case = f" (case {v.max_von_mises_case})" if envelope and v.max_von_mises_case else ""
        ax.annotate(f"peak {v.max_von_mises:.4g}{in_case}", (px, py), xytext=(6, 6), textcoords="offset points",
                    fontsize=8, color="#d62828", zorder=6,
                    bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none", "alpha": 0.85})
    pad = 0.03 * max(w, h)
    ax.set_xlim(minx - pad, maxx + pad)
    ax.set_ylim(miny - pad, maxy + pad)
    ax.set_aspect("equal", adjustable="box")
    ax.set_facecolor("#ffffff")
    for spine in ax.spines.values():
        spine.set_color(COLOR_DOMAIN)
    ax.set_xlabel(f"x [{units.length}]")
    ax.set_ylabel(f"y [{units.length}]")
    comp = "n/a" if v.compliance is None else f"{v.compliance:.5g} {units.compliance}"
    title = f"{problem.name}: body-fitted check, compliance {comp}, {v.elements} triangles"
    if envelope:
        title += "\nvon Mises, envelope over load cases " + ", ".join(map(str, names))
    ax.set_title(title, fontsize=9)
    if handles:
        fig.legend(handles=handles, loc="lower left", bbox_to_anchor=(0.82, 0.15), fontsize=7, frameon=False,
                   handlelength=1.4, borderaxespad=0.0)
    if not v.ok:
        fig.text(0.5, 0.06, "NOT OK: " + v.problems[0][:140], ha="center", fontsize=7, color="#d62828")
    fig.text(0.5, 0.015, CAUTION, ha="center", va="bottom", fontsize=7, color="#5c677d")
    return fig


def _field_name(name: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in str(name))


def verification_vtu(v: Verification) -> bytes:
    """VTK unstructured grid (XML, .vtu): the mesh (6-node or 3-node triangles), point data
    ``displacement_<case>`` for every case (plus ``displacement`` when there is one case) and
    nodal ``von_mises``, cell data ``von_mises`` at element centres (envelope over cases)."""
    import meshio

    pts = np.column_stack([v.points, np.zeros(len(v.points))])
    cell_type = "triangle6" if v.triangles.shape[1] == 6 else "triangle"
    point_data = {"von_mises": v.von_mises}
    for c, name in enumerate(v.case_names):
        u = np.column_stack([v.displacement[:, :, c], np.zeros(len(v.points))])
        point_data[f"displacement_{_field_name(name)}"] = u
        if len(v.case_names) == 1:
            point_data["displacement"] = u
    mesh = meshio.Mesh(pts, [(cell_type, v.triangles)], point_data=point_data,
                       cell_data={"von_mises": [v.element_von_mises]})
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "verify.vtu"
        meshio.write(path, mesh, file_format="vtu")
        return path.read_bytes()


def write_verification(v: Verification, outdir, problem: Problem) -> dict[str, Path]:
    """Write verify.json, stress.png and verify.vtu into ``outdir`` (created if missing).

    Every file is rendered in memory first, then written atomically, so a failure leaves
    no half-written file. Returns {file name: path}.
    """
    from .atomic import atomic_write_bytes, json_text

    rendered = {
        "verify.json": json_text(verification_record(v, problem)).encode("utf-8"),
        "stress.png": stress_png(v, problem),
        "verify.vtu": verification_vtu(v),
    }
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    return {name: atomic_write_bytes(outdir / name, data) for name, data in rendered.items()}
