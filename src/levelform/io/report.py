"""A self-contained HTML report of a method comparison.

One file that opens offline: no network, no external style sheet, script or font; every
figure is embedded as a base64 PNG data URI. Plain semantic HTML with a small inline style.
"""
from __future__ import annotations

import base64
from html import escape

from ..spec import CAUTION

_STYLE = """
body { font-family: system-ui, sans-serif; color: #22303a; background: #ffffff;
       max-width: 1180px; margin: 1.5rem auto; padding: 0 1rem; line-height: 1.45; }
h1 { font-size: 1.5rem; margin-bottom: 0.2rem; }
h2 { font-size: 1.15rem; margin-top: 2rem; border-bottom: 1px solid #d5d9e0; }
.caution { border-left: 6px solid #bc4749; background: #fbf1ef; padding: 0.7rem 1rem;
           margin: 1rem 0; }
table { border-collapse: collapse; font-size: 0.9rem; margin: 0.5rem 0; width: 100%; }
th, td { border-bottom: 1px solid #d5d9e0; padding: 0.3rem 0.6rem; text-align: right; }
th { background: #f4f5f7; font-weight: 600; }
td:first-child, th:first-child { text-align: left; }
caption { caption-side: bottom; text-align: left; font-size: 0.8rem; color: #5c677d;
          padding-top: 0.4rem; }
figure { margin: 1rem 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #e3e6ea; }
figcaption { font-size: 0.85rem; color: #5c677d; }
.muted { color: #5c677d; font-size: 0.85rem; }
"""


def _img(png: bytes, alt: str, cls: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return f'<img class="{cls}" src="data:image/png;base64,{data}" alt="{escape(alt)}">'


def _count(n: int) -> str:
    return "one method" if n == 1 else f"{n} methods"


def _fmt(v, digits: int = 5) -> str:
    if v is None:
        return "&ndash;"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return str(v)
    return escape(f"{v:.{digits}g}")


def _table(comparison) -> str:
    u = comparison.problem.units
    has_body = any(r.get("bodyfitted_compliance") is not None for r in comparison.rows.values())
    cols = [
        ("method", "method", None),
        ("crisp_compliance", f"crisp compliance [{u.compliance}]", 6),
        ("ratio_to_levelset", "ratio to level set", 4),
    ]
    if any(r.get("ratio_to_truss") is not None for r in comparison.rows.values()):
        cols.append(("ratio_to_truss", "ratio to truss reference", 4))
    if has_body:
        cols.append(("bodyfitted_compliance", f"body-fitted compliance [{u.compliance}]", 6))
    cols += [
        ("material_fraction", "material fraction", 4),
        ("outline_length", f"outline length [{u.length}]", 5),
        ("holes", "holes", None),
        ("smallest_member_width", f"smallest member width [{u.length}]", 4),
        ("iterations", "iterations", None),
        ("seconds", "wall time [s]", 3),
        ("own_compliance", f"method's own compliance [{u.compliance}]", 6),
        ("status", "status", None),
    ]
    limits = comparison.problem.fabrication
    asked = [k for k in ("min_member", "min_hole") if getattr(limits, k, None)]
    if asked:
        cols.insert(-1, ("limits_met", "fabrication limits met (" + ", ".join(asked) + ")", None))
    head = "".join(f'<th scope="col">{escape(label)}</th>' for _, label, _ in cols)
    body = []
    for m in comparison.methods:
        row = comparison.rows[m]
        cells = []
        for key, _, digits in cols:
            v = row.get(key)
            if key == "method":
                cells.append(f'<th scope="row">{escape(str(v))}</th>')
            elif key == "status":
                cells.append(f"<td>{escape(str(v))}</td>")
            elif key == "limits_met":
                measured = ", ".join(f"{k} {_fmt(x, 4)}" for k, x in row.get("limits", {}).items())
                cells.append(f"<td>{'yes' if v else 'no'} ({escape(measured)})</td>")
            elif key == "bodyfitted_compliance" and row.get("bodyfitted_ok") is False:
                cells.append(f"<td>{_fmt(v, digits)}&nbsp;*</td>")
            else:
                cells.append(f"<td>{_fmt(v, digits or 5)}</td>")
        body.append(f'<tr class="method-row" data-method="{escape(m)}">{"".join(cells)}</tr>')
    note = ""
    if asked:
        note += ("\n<p class=\"muted\">Fabrication limits: only the level-set method shapes its design to "
                 "them (a filter during the run); the density-based and evolutionary outlines are measured "
                 "as they come, and the table says whether each meets them.</p>")
    if has_body and any(r.get("bodyfitted_ok") is False for r in comparison.rows.values()):
        note += ("\n<p class=\"muted\">* A support or load of the problem lies partly off this "
                "outline (for example a clamped edge the design leaves bare); the body-fitted "
                "figure is for the outline as it is actually held and loaded.</p>")
    return (
        '<table id="comparison">\n<caption>Crisp compliance: the crisp outline of each method '
        "analysed by the same analysis (see below). The method's own compliance is the figure "
        "the method reports for its own design on its own grid, for reference only.</caption>\n"
        f"<thead><tr>{head}</tr></thead>\n<tbody>\n" + "\n".join(body) + "\n</tbody>\n</table>" + note
    )


def _bodyfitted_paragraph(comparison) -> str:
    if not any(r.get("bodyfitted_compliance") is not None for r in comparison.rows.values()):
        return ""
    return ("\n<p>The body-fitted compliance is a second, independent check of the same "
            "outlines: each is meshed with triangles that follow its edges and solved again "
            "(quadratic elements), with no grid and no ersatz material.</p>")


def _truss_section(comparison) -> str:
    """What the truss reference is, its figure per load case, or why it is missing."""
    ev = comparison.evaluation or {}
    u = comparison.problem.units
    ref = getattr(comparison, "truss", None)
    note = ev.get("truss_note")
    if ev.get("truss_compliance") is None or ref is None:
        why = escape(str(note)) if note else "it was not computed"
        return f'\n<h2>Truss reference</h2>\n<p id="truss-reference">No truss reference: {why}.</p>'
    from .truss_files import truss_png

    cases = ref.cases
    if len(cases) == 1:
        words = (f"the stiffest truss that fits in the domain and carries the loads to the supports, with "
                 f"the same material volume as the goal ({_fmt(ref.volume, 5)} {escape(u.length)}^3), has "
                 f"compliance {_fmt(cases[0].compliance, 6)} {escape(u.compliance)}")
    else:
        each = ", ".join(f"{_fmt(c.compliance, 6)} {escape(u.compliance)} for load case {escape(c.name)}"
                         for c in cases)
        words = (f"each load case has its own reference, the stiffest truss of the goal's material volume "
                 f"({_fmt(ref.volume, 5)} {escape(u.length)}^3) for that case alone: {each}. No one truss is "
                 f"the stiffest for every case at once, so the table's ratio divides the weighted crisp "
                 f"compliance by the weighted sum of these references "
                 f"({_fmt(ref.compliance, 6)} {escape(u.compliance)})")
    extra = f" {escape(str(note))}." if note else ""
    return (f'\n<h2>Truss reference</h2>\n<p id="truss-reference">A ground structure of {ref.nodes} nodes '
            f"{_fmt(ref.spacing, 4)} {escape(u.length)} apart ({ref.node_pairs} candidate bars) was solved as "
            f"a plastic layout linear program: {words}. A ratio near 1 means the outline is nearly as stiff "
            "as the best layout the loads and supports allow; a continuum design is not bounded below by "
            f"this figure in every case, so read it as a reference, not a proof.{extra}</p>\n"
            f"<figure>{_img(truss_png(ref), 'the truss reference layout', 'truss')}"
            "<figcaption>The truss reference: bars in tension red, in compression blue, line width in "
            "proportion to the bar's area.</figcaption></figure>")


def report_html(comparison, overview_png: bytes | None = None) -> str:
    """The report as one HTML string. ``overview_png`` is the side-by-side figure (rendered
    by :func:`levelform.io.figures.comparison_png` when not given)."""
    from .figures import comparison_png, design_png, history_png

    p = comparison.problem
    u = p.units
    ev = comparison.evaluation
    if overview_png is None:
        overview_png = comparison_png(comparison)
    from ..version import __version__

    sections = []
    for m in comparison.methods:
        result = comparison.results[m]
        row = comparison.rows[m]
        sections.append(
            f'<section class="method" id="method-{escape(m)}">\n<h3>{escape(m)}</h3>\n'
            f"<figure>{_img(design_png(result), f'{m}: crisp outline of the design', 'design')}"
            f"<figcaption>{escape(m)}: crisp outline, crisp compliance "
            f"{_fmt(row['crisp_compliance'], 6)} {escape(u.compliance)}, material fraction "
            f"{_fmt(row['material_fraction'], 4)}.</figcaption></figure>\n"
            f"<figure>{_img(history_png(result), f'{m}: convergence history', 'history')}"
            f"<figcaption>{escape(m)}: the method's own compliance and material fraction per "
            f"iteration.</figcaption></figure>\n</section>"
        )
    cases = ", ".join(f"{escape(c.name)} (weight {c.weight:g})" for c in p.cases)
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Method comparison: {escape(p.name)}</title>
<style>{_STYLE}</style>
</head>
<body>
<header>
<h1>Method comparison: {escape(p.name)}</h1>
<p class="muted">levelform {escape(__version__)}; problem file {escape(str(p.source or "(none)"))}</p>
</header>
<main>
<p class="caution" role="note"><strong>Caution.</strong> {escape(CAUTION)}</p>
<p>The same problem was optimized by {_count(len(comparison.methods))}, with the goal of
keeping a material fraction of {p.goal.material:g} of the domain; load cases: {cases}.</p>
<h2>Results</h2>
{_table(comparison)}
<p class="muted">Units: lengths in {escape(u.length)}, forces in {escape(u.force)},
compliance (work of the loads) in {escape(u.compliance)}, wall time in seconds.
Material fraction is the outline's area over the domain's area. Outline length counts
every edge, holes included (the cut length).</p>
<figure>{_img(overview_png, "crisp outlines of all methods side by side", "overview")}
<figcaption>The crisp outlines side by side, each over the design domain.</figcaption></figure>
<h2>How this was evaluated</h2>
<p>Each method ran on the same problem with its own settings and grid, and returned a crisp
outline (for the density-based and evolutionary methods: the boundary drawn through their
cell densities). Every outline was then analysed by one and the same linear plane-stress
analysis: square cells of {_fmt(ev["grid_cell"], 6)} {escape(u.length)} (the problem's cell
divided by {int(ev["refine"])}), each cell's stiffness scaled by the exact share of its area
that the outline covers, with void at a stiffness ratio of {_fmt(ev["ersatz"], 3)}, one solve for
all load cases (solver: {escape(str(ev.get("solver", "direct")))}, held to a relative residual of 1e-10
where iterative). The crisp compliance in the table is the weighted sum of the load
cases' compliances from that analysis; a lower value is a stiffer design. Compare
compliances only together with the material fractions: a design with more material is
stiffer for that reason alone.</p>{_bodyfitted_paragraph(comparison)}{_truss_section(comparison)}
<h2>Each method</h2>
{"".join(sections)}
</main>
<footer>
<p class="caution" role="note"><strong>Caution.</strong> {escape(CAUTION)}</p>
</footer>
</body>
</html>
"""
