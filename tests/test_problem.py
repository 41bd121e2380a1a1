"""Tests of the problem-file reader (levelform.problem).

The key names and messages follow docs/problem-format.md. Where a value is refused for a
physical or geometric reason, the reason's source is named beside the case.
"""
from __future__ import annotations

import math
import random
from pathlib import Path

import pytest
from shapely.geometry import Polygon

from levelform import resources
from levelform.problem import reader as problem_module
from levelform.problem.reader import load_problem, parse_problem
from levelform.spec import (
    Domain,
    Goal,
    Load,
    LoadCase,
    Material,
    Method,
    Problem,
    ProblemError,
    Region,
    Support,
    Units,
)

BAD_DIR = Path(__file__).parent / "bad_inputs"


@pytest.fixture(autouse=True)
def _plenty_of_memory(monkeypatch):
    """Make the memory check independent of the machine running the tests."""
    monkeypatch.setattr(resources, "available_memory_bytes", lambda: 16 * 1024**3)


# An invented demo: a steel wall bracket for a shop sign, 240 x 160 mm, two bolts.
SECTIONS = {
    "head": 'name = "Shop-sign wall bracket"\ndescription = "demo"\n',
    "units": '[units]\nlength = "mm"\nforce = "N"\n',
    "material": "[material]\nE = 210000.0\nnu = 0.3\nthickness = 8.0\n",
    "domain": (
        "[domain]\n"
        "outline = [[0, 0], [240, 0], [240, 160], [0, 160]]\n"
        "holes = [[[150, 100], [170, 100], [170, 120], [150, 120]]]\n"
        "cell = 2.0\n"
    ),
    "support": (
        '[[support]]\npoint = [6, 30]\nfix = "xy"\n\n'
        '[[support]]\npoint = [6, 130]\nfix = "xy"\n'
    ),
    "load": (
        '[[load]]\npoint = [234, 10]\nforce = [0, -1200]\ncase = "hanging"\n\n'
        '[[load]]\npoint = [234, 10]\nforce = [350, -1200]\ncase = "gust"\n'
    ),
    "case": (
        '[[case]]\nname = "hanging"\nweight = 1.0\n\n'
        '[[case]]\nname = "gust"\nweight = 0.5\n'
    ),
    "region": (
        '[[region]]\nkeep = "solid"\ncircle = [6, 30, 10]\n\n'
        '[[region]]\nkeep = "solid"\ncircle = [6, 130, 10]\n\n'
        '[[region]]\nkeep = "empty"\nbox = [60, 140, 120, 160]\n'
    ),
    "goal": "[goal]\nmaterial = 0.4\n",
    "method": '[method]\nname = "levelset"\niterations = 300\nsmoothing = 6.0\n',
}


def make(extra="", **over):
    """The good file with sections replaced (a string) or removed (None)."""
    parts = []
    for key, text in SECTIONS.items():
        text = over.get(key, text)
        if text is not None:
            parts.append(text)
    return "\n".join(parts) + "\n" + extra


def write(tmp_path, text, name="case.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def problems_of(tmp_path, text):
    with pytest.raises(ProblemError) as info:
        load_problem(write(tmp_path, text))
    return info.value.problems


def test_good_file_parses_into_dataclasses(tmp_path):
    # Expected values are the ones written in SECTIONS above.
    p = load_problem(write(tmp_path, make(), "bracket.toml"))
    assert isinstance(p, Problem)
    assert p.name == "Shop-sign wall bracket"
    assert p.source == str(tmp_path / "bracket.toml")
    assert p.units == Units("mm", "N")
    assert p.units.stress == "N/mm^2"
    assert p.material == Material(E=210000.0, nu=0.3, thickness=8.0)
    assert p.domain == Domain(
        outline=((0.0, 0.0), (240.0, 0.0), (240.0, 160.0), (0.0, 160.0)),
        holes=(((150.0, 100.0), (170.0, 100.0), (170.0, 120.0), (150.0, 120.0)),),
        cell=2.0,
    )
    assert all(isinstance(c, float) for c in p.domain.outline[0])
    assert p.supports == (
        Support("point", (6.0, 30.0), "xy", None, "support[1]"),
        Support("point", (6.0, 130.0), "xy", None, "support[2]"),
    )
    assert p.loads == (
        Load("point", (234.0, 10.0), (0.0, -1200.0), "hanging", None, "load[1]"),
        Load("point", (234.0, 10.0), (350.0, -1200.0), "gust", None, "load[2]"),
    )
    assert p.cases == (LoadCase("hanging", 1.0), LoadCase("gust", 0.5))
    assert p.regions == (
        Region("solid", "circle", (6.0, 30.0, 10.0), "region[1]"),
        Region("solid", "circle", (6.0, 130.0, 10.0), "region[2]"),
        Region("empty", "box", (60.0, 140.0, 120.0, 160.0), "region[3]"),
    )
    assert p.goal == Goal(0.4)
    assert p.method == Method(name="levelset", iterations=300, smoothing=6.0)
    assert p.raw["material"]["E"] == 210000.0


def test_defaults_segments_boxes_and_derived_cases():
    data = {
        "material": {"E": 70000, "nu": 0.33, "thickness": 5},  # ints are fine for floats
        "domain": {"outline": [[0, 0], [100, 0], [100, 50], [0, 50]], "cell": 1},
        "support": [{"segment": [[0, 0], [0, 50]], "fix": "xy", "pad": False},
                    {"box": [90, -5, 110, 5], "fix": "y"}],
        "load": [{"segment": [[40, 50], [60, 50]], "force_per_length": [0, -2.5]},
                 {"point": [100, 25], "force": [10, 0], "case": "side", "pad": True}],
        "region": [{"keep": "empty", "polygon": [[30, 10], [50, 10], [40, 30]]}],
        "goal": {"material": 0.5},
    }
    p = parse_problem(data, name="plate")
    assert p.name == "plate" and p.source is None
    assert p.units == Units()  # defaults mm, N
    assert p.method == Method()  # every default from spec.Method
    assert p.material.E == 70000.0 and isinstance(p.material.E, float)
    assert p.supports[0] == Support("segment", ((0.0, 0.0), (0.0, 50.0)), "xy", False,
                                    "support[1]")
    assert p.supports[1].where == (90.0, -5.0, 110.0, 5.0)
    assert p.loads[0].kind == "segment" and p.loads[0].force == (0.0, -2.5)
    assert p.loads[0].case == "main" and p.loads[1].pad is True
    # No [[case]] tables: one case per case name the loads use, weight 1.
    assert p.cases == (LoadCase("main", 1.0), LoadCase("side", 1.0))
    assert p.regions[0].where == ((30.0, 10.0), (50.0, 10.0), (40.0, 30.0))


def test_outline_orientation_does_not_matter():
    # A simple polygon is valid in either ring orientation (OGC Simple Features, from
    # memory); shapely agrees.
    ring = [[0, 0], [0, 50], [100, 50], [100, 0]]  # clockwise
    assert Polygon(ring).is_valid
    data = {
        "material": {"E": 1.0, "nu": 0.0, "thickness": 1.0},
        "domain": {"outline": ring, "cell": 1.0},
        "support": [{"segment": [[0, 0], [0, 50]], "fix": "xy"}],
        "load": [{"point": [100, 25], "force": [0, -1]}],
        "goal": {"material": 0.3},
    }
    assert parse_problem(data).domain.outline[1] == (0.0, 50.0)


# (id, file text, key path the message must start with, extra fragment or None)
BAD = [
    ("unknown-top", make(head="materials = 1\n"), "materials", "did you mean 'material'"),
    ("typo-thickness", make(material="[material]\nE = 1.0\nnu = 0.3\nthicknes = 8.0\n"),
     "material.thicknes", "did you mean 'thickness'"),
    # TOML v1.0.0 (toml.io): true/false are booleans, a type of their own, not numbers.
    ("E-bool", make(material="[material]\nE = true\nnu = 0.3\nthickness = 8.0\n"),
     "material.E", "got true"),
    ("E-string", make(material='[material]\nE = "210 GPa"\nnu = 0.3\nthickness = 8.0\n'),
     "material.E", '"210 GPa"'),
    # TOML v1.0.0 (toml.io, Float): nan and inf are valid float literals.
    ("E-nan", make(material="[material]\nE = nan\nnu = 0.3\nthickness = 8.0\n"),
     "material.E", "NaN"),
    ("E-negative", make(material="[material]\nE = -5.0\nnu = 0.3\nthickness = 8.0\n"),
     "material.E", "> 0"),
    # Isotropic elasticity needs -1 < nu < 1/2 for a positive-definite strain energy
    # (Timoshenko & Goodier, Theory of Elasticity; from memory).
    ("nu-half", make(material="[material]\nE = 1.0\nnu = 0.5\nthickness = 8.0\n"),
     "material.nu", "-1 and 0.5"),
    ("nu-minus-one", make(material="[material]\nE = 1.0\nnu = -1\nthickness = 8.0\n"),
     "material.nu", None),
    ("thickness-zero", make(material="[material]\nE = 1.0\nnu = 0.3\nthickness = 0\n"),
     "material.thickness", None),
    ("E-missing", make(material="[material]\nnu = 0.3\nthickness = 8.0\n"),
     "material.E", "missing"),
    ("material-missing", make(material=None), "material", "missing"),
    ("material-not-table", make(head="material = 3\n", material=None), "material", "table"),
    ("goal-one", make(goal="[goal]\nmaterial = 1.0\n"), "goal.material", None),
    ("goal-zero", make(goal="[goal]\nmaterial = 0\n"), "goal.material", None),
    ("goal-missing", make(goal=None), "goal", "missing"),
    ("cell-zero", make(domain="[domain]\noutline = [[0, 0], [9, 0], [9, 9]]\ncell = 0\n"),
     "domain.cell", "> 0"),
    ("cell-inf", make(domain="[domain]\noutline = [[0, 0], [9, 0], [9, 9]]\ncell = inf\n"),
     "domain.cell", "infinite"),
    ("cell-missing", make(domain="[domain]\noutline = [[0, 0], [240, 0], [240, 160]]\n"),
     "domain.cell", "missing"),
    # A bow-tie ring crosses itself at (120, 80); GEOS reports a self-intersection there.
    ("outline-bowtie", make(domain="[domain]\noutline = [[0, 0], [240, 160], [240, 0], "
                                   "[0, 160]]\ncell = 2\n"),
     "domain.outline", "Self-intersection at (120, 80)"),
    ("outline-collinear", make(domain="[domain]\noutline = [[0, 0], [10, 0], [20, 0]]\n"
                                      "cell = 2\n"),
     "domain.outline", None),
    ("outline-two-points", make(domain="[domain]\noutline = [[0, 0], [10, 0]]\ncell = 2\n"),
     "domain.outline", "at least 3 points"),
    ("outline-bad-point", make(domain='[domain]\noutline = [[0, 0], [240, 0], "x"]\n'
                                      "cell = 2\n"),
     "domain.outline[3]", "[x, y]"),
    ("hole-outside", make(domain="[domain]\noutline = [[0, 0], [240, 0], [240, 160], "
                                 "[0, 160]]\nholes = [[[300, 0], [310, 0], [310, 10]]]\n"
                                 "cell = 2\n"),
     "domain.holes[1]", "inside the outline"),
    ("holes-overlap", make(domain="[domain]\noutline = [[0, 0], [240, 0], [240, 160], "
                                  "[0, 160]]\nholes = [[[100, 50], [140, 50], [140, 90], "
                                  "[100, 90]], [[120, 70], [160, 70], [160, 110], "
                                  "[120, 110]]]\ncell = 2\n"),
     "domain.holes[2]", "overlaps domain.holes[1]"),
    ("hole-bowtie", make(domain="[domain]\noutline = [[0, 0], [240, 0], [240, 160], "
                                "[0, 160]]\nholes = [[[100, 50], [140, 90], [140, 50], "
                                "[100, 90]]]\ncell = 2\n"),
     "domain.holes[1]", "Self-intersection"),
    ("support-two-locations", make(support='[[support]]\npoint = [6, 30]\n'
                                           'box = [0, 0, 10, 160]\nfix = "xy"\n'),
     "support[1]", "exactly one"),
    ("support-no-location", make(support='[[support]]\nfix = "xy"\n'),
     "support[1]", "no location"),
    ("support-fix-z", make(support='[[support]]\nsegment = [[0, 0], [0, 160]]\n'
                                   'fix = "xz"\n'),
     "support[1].fix", '"x", "y" or "xy", got "xz"; did you mean \'xy\''),
    ("support-fix-missing", make(support='[[support]]\nsegment = [[0, 0], [0, 160]]\n'),
     "support[1].fix", "missing"),
    ("support-zero-segment", make(support='[[support]]\nsegment = [[0, 5], [0, 5]]\n'
                                          'fix = "xy"\n'),
     "support[1].segment", "zero length"),
    ("support-box-flipped", make(support='[[support]]\nbox = [10, 0, 10, 160]\n'
                                         'fix = "xy"\n'),
     "support[1].box", "x1 > x0"),
    ("support-point-off", make(support='[[support]]\npoint = [-20, 30]\nfix = "xy"\n\n'
                                       '[[support]]\npoint = [6, 130]\nfix = "xy"\n'),
     "support[1].point", "20 mm outside"),
    ("support-box-off", make(support='[[support]]\nbox = [-50, 0, -10, 160]\nfix = "xy"\n'
                                     '\n[[support]]\npoint = [6, 130]\nfix = "xy"\n'),
     "support[1].box", "does not touch"),
    ("support-pad-string", make(support='[[support]]\nsegment = [[0, 0], [0, 160]]\n'
                                        'fix = "xy"\npad = "yes"\n'),
     "support[1].pad", "true or false"),
    ("support-single-table", make(support='[support]\nsegment = [[0, 0], [0, 160]]\n'
                                          'fix = "xy"\n'),
     "support", "[[support]]"),
    ("no-supports", make(support=None), "support", "no supports"),
    # The point (160, 110) is inside the 20 x 20 hole, 10 mm from the nearest material.
    ("load-in-hole", make(load='[[load]]\npoint = [160, 110]\nforce = [0, -1]\n'
                               'case = "hanging"\n\n[[load]]\npoint = [234, 10]\n'
                               'force = [1, 0]\ncase = "gust"\n'),
     "load[1].point", "10 mm outside"),
    ("load-segment-off", make(load='[[load]]\nsegment = [[200, 160], [280, 160]]\n'
                                   'force_per_length = [0, -1]\ncase = "hanging"\n\n'
                                   '[[load]]\npoint = [234, 10]\nforce = [1, 0]\n'
                                   'case = "gust"\n'),
     "load[1].segment", "40 mm of the segment"),
    ("load-zero-force", make(load='[[load]]\npoint = [234, 10]\nforce = [0, 0]\n'
                                  'case = "hanging"\n\n[[load]]\npoint = [234, 10]\n'
                                  'force = [1, 0]\ncase = "gust"\n'),
     "load[1].force", "zero"),
    ("load-force-abc", make(load='[[load]]\npoint = [234, 10]\nforce = "abc"\n'),
     "load[1].force", 'expected two finite numbers [fx, fy], got "abc"'),
    ("load-point-with-q", make(load='[[load]]\npoint = [234, 10]\n'
                                    'force_per_length = [0, -1]\ncase = "hanging"\n'),
     "load[1].force_per_length", "point load takes force"),
    ("load-segment-with-force", make(load='[[load]]\nsegment = [[200, 0], [240, 0]]\n'
                                          'force = [0, -1]\ncase = "hanging"\n'),
     "load[1].force", "force_per_length"),
    ("load-box", make(load='[[load]]\nbox = [0, 0, 1, 1]\nforce = [0, -1]\n'),
     "load[1].box", "point or along a segment"),
    ("load-case-undeclared", make(load='[[load]]\npoint = [234, 10]\nforce = [0, -1]\n'
                                       'case = "snow"\n'),
     "load[1].case", 'case "snow" is not declared'),
    ("load-case-implicit-main", make(load='[[load]]\npoint = [234, 10]\nforce = [0, -1]\n'),
     "load[1]", '"main"'),
    ("no-loads", make(load=None, case=None), "load", "no loads"),
    ("case-duplicate", make(case='[[case]]\nname = "hanging"\n\n[[case]]\nname = "gust"\n'
                                 '\n[[case]]\nname = "hanging"\n'),
     "case[3].name", "already declared in case[1]"),
    ("case-weight-zero", make(case='[[case]]\nname = "hanging"\nweight = 0\n\n'
                                   '[[case]]\nname = "gust"\n'),
     "case[1].weight", "> 0"),
    ("case-weight-nan", make(case='[[case]]\nname = "hanging"\nweight = nan\n\n'
                                  '[[case]]\nname = "gust"\n'),
     "case[1].weight", "NaN"),
    ("case-unused", make(case='[[case]]\nname = "hanging"\n\n[[case]]\nname = "gust"\n\n'
                              '[[case]]\nname = "storm"\n'),
     "case[3]", '"storm" has no loads'),
    ("region-radius-zero", make(region='[[region]]\nkeep = "solid"\ncircle = [6, 30, 0]\n'),
     "region[1].circle", "radius"),
    ("region-polygon-bowtie", make(region='[[region]]\nkeep = "empty"\n'
                                          "polygon = [[100, 50], [140, 90], [140, 50], "
                                          "[100, 90]]\n"),
     "region[1].polygon", "Self-intersection"),
    ("region-keep-wrong", make(region='[[region]]\nkeep = "void"\ncircle = [50, 50, 5]\n'),
     "region[1].keep", '"solid" or "empty", got "void"; did you mean \'empty\''),
    ("region-overlap", make(region='[[region]]\nkeep = "solid"\ncircle = [60, 60, 10]\n\n'
                                   '[[region]]\nkeep = "empty"\nbox = [60, 60, 80, 80]\n'),
     "region[2]", "overlaps the keep-solid region region[1]"),
    ("region-empty-on-load", make(region='[[region]]\nkeep = "empty"\n'
                                         "circle = [230, 10, 8]\n"),
     "region[1]", "covers load load[1]"),
    ("region-empty-on-support", make(region='[[region]]\nkeep = "empty"\n'
                                            "box = [0, 100, 20, 140]\n"),
     "region[1]", "covers support support[2]"),
    # 240 x 160 plate: a 50 mm cell gives 3.2 cells across 160 mm; 160 / 4 = 40 mm.
    ("cell-too-big", make(domain="[domain]\noutline = [[0, 0], [240, 0], [240, 160], "
                                 "[0, 160]]\ncell = 50\n"),
     "domain.cell", "at most 40 mm"),
    ("iterations-zero", make(method="[method]\niterations = 0\n"), "method.iterations",
     "1 to 100000"),
    ("iterations-float", make(method="[method]\niterations = 1.5\n"), "method.iterations",
     None),
    ("iterations-huge", make(method="[method]\niterations = 100001\n"),
     "method.iterations", None),
    ("smoothing-negative", make(method="[method]\nsmoothing = -1.0\n"), "method.smoothing",
     "> 0"),
    ("step-bool", make(method="[method]\nstep = false\n"), "method.step", None),
    ("method-name", make(method='[method]\nname = "levelsett"\n'), "method.name",
     "did you mean 'levelset'"),
    ("solver", make(method='[method]\nsolver = "gpu"\n'), "method.solver",
     '"auto", "direct", "pardiso", "multigrid" or "pyamg"'),
    ("volume-step", make(method="[method]\nvolume_step = 0.6\n"), "method.volume_step",
     None),
    ("ersatz", make(method="[method]\nersatz = 1\n"), "method.ersatz", None),
    ("method-unknown-key", make(method="[method]\nsmothing = 3.0\n"), "method.smothing",
     "did you mean 'smoothing'"),
    ("units-empty", make(units='[units]\nlength = ""\n'), "units.length", None),
    ("units-number", make(units="[units]\nforce = 5\n"), "units.force", None),
    ("name-number", make(head="name = 5\n"), "name", "string"),
    ("date-value", make(goal="[goal]\nmaterial = 1979-05-27\n"), "goal.material",
     "date"),
]


@pytest.mark.parametrize("text,key,fragment", [b[1:] for b in BAD],
                         ids=[b[0] for b in BAD])
def test_bad_input_names_the_key(tmp_path, text, key, fragment):
    problems = problems_of(tmp_path, text)
    hits = [m for m in problems if m.startswith(key + ":")]
    assert hits, f"no message for {key!r} in {problems}"
    if fragment is not None:
        assert any(fragment in m for m in hits), hits


def test_enough_distinct_bad_inputs():
    assert len({b[0] for b in BAD}) >= 30
    assert len({b[1] for b in BAD}) == len(BAD)


def test_three_mistakes_are_all_reported(tmp_path):
    text = make(material="[material]\nE = 210000.0\nnu = 0.7\nthicknes = 8.0\n",
                goal="[goal]\nmaterial = 1.4\n")
    problems = problems_of(tmp_path, text)
    keys = {m.split(":", 1)[0] for m in problems}
    assert {"material.nu", "material.thicknes", "material.thickness",
            "goal.material"} <= keys
    assert any("did you mean 'thickness'" in m for m in problems)


# A hint is offered only for a close spelling. Reference for "close": the similarity of
# Python's difflib.SequenceMatcher (standard library), checked here beside each case, and
# Damerau's single-error kinds (Damerau 1964, CACM 7(3)): a wrong, missing or extra letter,
# or two neighbouring letters swapped.
def test_far_off_key_gets_no_hint(tmp_path):
    import difflib

    # "repeat" is no setting: its nearest key "penalty" shares too little to be meant.
    assert difflib.SequenceMatcher(None, "repeat", "penalty").ratio() < 0.7
    problems = problems_of(tmp_path, make(method="[method]\nrepeat = 3\n"))
    (msg,) = [m for m in problems if m.startswith("method.repeat:")]
    assert "did you mean" not in msg
    assert msg.startswith("method.repeat: unknown key; valid keys here: name, iterations")
    # "min_hole" belongs in [goal] or [fabrication]; in [domain] "holes" is not meant.
    problems = problems_of(tmp_path, make(domain=SECTIONS["domain"] + "min_hole = 3.0\n"))
    (msg,) = [m for m in problems if m.startswith("domain.min_hole:")]
    assert "did you mean" not in msg


@pytest.mark.parametrize("section,typo,meant", [
    ("method", "smothing", "smoothing"),  # a missing letter; similarity 0.94
    ("material", "thicknes", "thickness"),  # a missing letter; similarity 0.94
    ("method", "stpe", "step"),  # two neighbours swapped; similarity 0.75
])
def test_close_typo_gets_a_hint(tmp_path, section, typo, meant):
    import difflib

    assert difflib.SequenceMatcher(None, typo, meant).ratio() >= 0.75
    body = {"method": "[method]\n", "material": "[material]\nE = 1.0\nnu = 0.3\n"}[section]
    problems = problems_of(tmp_path, make(**{section: body + f"{typo} = 8.0\n"}))
    (msg,) = [m for m in problems if m.startswith(f"{section}.{typo}:")]
    assert f"did you mean '{meant}'?" in msg


def test_one_swap_in_a_short_key_gets_a_hint(tmp_path):
    import difflib

    # In a three-letter word one swap leaves a similarity of only 2/3 (difflib), yet it
    # is a single error (Damerau 1964); the hint must still come.
    assert difflib.SequenceMatcher(None, "fxi", "fix").ratio() < 0.75
    text = make(support='[[support]]\npoint = [6, 30]\nfxi = "xy"\n\n'
                        '[[support]]\npoint = [6, 130]\nfix = "xy"\n')
    problems = problems_of(tmp_path, text)
    (msg,) = [m for m in problems if m.startswith("support[1].fxi:")]
    assert "did you mean 'fix'?" in msg


def test_malformed_toml_names_line_and_column(tmp_path):
    text = "[material]\nE = 210000.0\nnu = = 0.3\n"
    problems = problems_of(tmp_path, text)
    assert len(problems) == 1
    assert "line 3, column 6" in problems[0] and "not valid TOML" in problems[0]
    assert problems[0].startswith(str(tmp_path / "case.toml"))


def test_unclosed_array_at_end_of_document(tmp_path):
    problems = problems_of(tmp_path, "[domain]\noutline = [[0, 0], [1, 0]")
    assert len(problems) == 1 and "line 2" in problems[0]


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(ProblemError, match="file not found"):
        load_problem(tmp_path / "nope.toml")
    with pytest.raises(ProblemError, match="folder"):
        load_problem(tmp_path)


def test_not_utf8(tmp_path):
    path = tmp_path / "latin.toml"
    path.write_bytes(b'name = "caf\xe9"\n')
    with pytest.raises(ProblemError, match="UTF-8"):
        load_problem(path)


# Plane statics: a rigid plate has three degrees of freedom (two slides, one turn); it is
# improperly held when the reaction lines are all parallel or all meet in one point
# (Hibbeler, Engineering Mechanics: Statics, "improper constraints"; from memory).
PLATE = {
    "material": {"E": 1.0, "nu": 0.3, "thickness": 1.0},
    "domain": {"outline": [[0, 0], [200, 0], [200, 100], [0, 100]], "cell": 2.0},
    "load": [{"point": [200, 50], "force": [0, -1]}],
    "goal": {"material": 0.4},
}


def _with_supports(*supports):
    return dict(PLATE, support=[dict(s) for s in supports])


@pytest.mark.parametrize("supports,fragment", [
    # one pin: free to turn about the pin
    ([{"point": [0, 50], "fix": "xy"}], "rotate about (0, 50)"),
    # x-rollers on the line y = 50 and y-rollers on x = 50: all lines meet at (50, 50)
    ([{"point": [0, 50], "fix": "x"}, {"point": [50, 0], "fix": "y"},
      {"point": [200, 50], "fix": "x"}], "rotate about (50, 50)"),
    # a pin and a roller whose reaction line passes through the pin
    ([{"point": [0, 0], "fix": "xy"}, {"point": [200, 0], "fix": "x"}],
     "rotate about (0, 0)"),
    # parallel reactions only: y-rollers
    ([{"point": [0, 0], "fix": "y"}, {"point": [200, 0], "fix": "y"}], "slide in x"),
    ([{"segment": [[0, 0], [0, 100]], "fix": "x"}], "slide in y"),
    # a single x-roller: two free motions
    ([{"point": [0, 50], "fix": "x"}], "slide in y and to rotate"),
])
def test_rigid_body_mechanisms_are_refused(supports, fragment):
    with pytest.raises(ProblemError) as info:
        parse_problem(_with_supports(*supports))
    hits = [m for m in info.value.problems if m.startswith("support:")]
    assert hits and fragment in hits[0], info.value.problems


@pytest.mark.parametrize("supports", [
    [{"point": [0, 0], "fix": "xy"}, {"point": [200, 0], "fix": "y"}],  # pin + roller
    [{"point": [0, 0], "fix": "x"}, {"point": [0, 100], "fix": "x"},
     {"point": [100, 0], "fix": "y"}],
    [{"segment": [[0, 0], [0, 100]], "fix": "xy"}],  # clamped edge
    [{"box": [-10, -10, 10, 110], "fix": "xy"}],  # box clipped to the plate
])
def test_proper_supports_are_accepted(supports):
    assert parse_problem(_with_supports(*supports)).supports


def test_box_support_is_clipped_to_domain_bounds():
    # The box reaches 1 m below the plate; clipped to the plate it is 200 wide, so a
    # y-fixed box holds both slide in y and rotation, and with an x-fix at a corner it
    # holds everything.
    p = parse_problem(_with_supports({"box": [0, -1000, 200, 1], "fix": "y"},
                                     {"point": [0, 0], "fix": "x"}))
    assert len(p.supports) == 2


def test_memory_estimate_refuses_a_too_fine_grid(monkeypatch):
    # Allow 1 GiB; compare against resources.estimate_memory_bytes directly.
    monkeypatch.setattr(resources, "available_memory_bytes", lambda: 1024**3)
    data = dict(_with_supports({"segment": [[0, 0], [0, 100]], "fix": "xy"}))
    data["domain"] = dict(data["domain"], cell=0.01)
    n_cells = 200 * 100 / 0.01**2
    assert resources.estimate_memory_bytes(int(n_cells)) > 1024**3
    with pytest.raises(ProblemError) as info:
        parse_problem(data)
    (msg,) = [m for m in info.value.problems if m.startswith("domain.cell:")]
    assert "GiB" in msg
    smallest = float(msg.rsplit("at least ", 1)[1].split()[0])
    assert resources.estimate_memory_bytes(int(math.ceil(20000 / smallest**2))) <= 1024**3
    assert resources.estimate_memory_bytes(int(20000 / (0.99 * smallest) ** 2)) > 1024**3


def test_keep_regions_that_defeat_the_goal():
    data = _with_supports({"segment": [[0, 0], [0, 100]], "fix": "xy"})
    data["region"] = [{"keep": "solid", "box": [0, 0, 120, 100]}]  # 60 % of the plate
    with pytest.raises(ProblemError, match=r"goal.material: the keep-solid regions alone "
                                           r"fill 60.0%"):
        parse_problem(data)


def test_all_messages_start_with_a_key_path(tmp_path):
    for _, text, _, _ in BAD:
        for m in problems_of(tmp_path, text):
            head = m.split(":", 1)[0]
            assert head and " " not in head.replace(str(tmp_path), ""), m


@pytest.mark.parametrize("path", sorted(BAD_DIR.glob("*.toml")), ids=lambda p: p.name)
def test_files_in_bad_inputs(path):
    # Each file's first line says "# expect: key.path[, key.path...]".
    first = path.read_text(encoding="utf-8").splitlines()[0]
    expected = [k.strip() for k in first.split(":", 1)[1].split(",")]
    with pytest.raises(ProblemError) as info:
        load_problem(path)
    keys = [m.split(":", 1)[0] for m in info.value.problems]
    for e in expected:
        if e == "line":  # a TOML syntax error: the message names the file, line and column
            assert any(", line " in k for k in keys), info.value.problems
        else:  # the message's key path is the expected one or lies inside it
            assert any(k == e or k.startswith((e + ".", e + "[")) for k in keys), (e, info.value.problems)


def test_random_garbage_never_crashes(tmp_path):
    rng = random.Random(20240611)
    pieces = ["[", "]", "[[", "]]", "=", '"', "'", "\n", ",", "{", "}", "nan", "inf",
              "true", "1e999", "-0", "support", "load", "material", "domain", "x", ".",
              "#", "\\", "\t", " ", "0x1F", "1979-05-27T07:32:00Z", "\u00e9", "\x00"]
    for i in range(150):
        text = "".join(rng.choice(pieces) for _ in range(rng.randint(1, 40)))
        path = write(tmp_path, text, f"g{i}.toml")
        with pytest.raises(ProblemError):
            load_problem(path)


def test_random_values_in_every_slot_never_crash():
    rng = random.Random(7)
    values = [None, 0, -1, 1.5, float("nan"), float("inf"), True, "", "abc", [], [1],
              [1, 2], [[1, 2]], [[0, 0], [0, 0]], [1, 2, 3, 4], {}, {"a": 1},
              [[0, 0], [1, 0], [0, 1]], 10**30, -1e308]
    base = _with_supports({"segment": [[0, 0], [0, 100]], "fix": "xy"})
    slots = [("material", "E"), ("material", "nu"), ("domain", "outline"),
             ("domain", "holes"), ("domain", "cell"), ("goal", "material")]
    for _ in range(300):
        data = {k: (dict(v) if isinstance(v, dict) else list(v)) for k, v in base.items()}
        for _ in range(rng.randint(1, 3)):
            kind = rng.random()
            value = rng.choice(values)
            if kind < 0.5:
                sec, key = rng.choice(slots)
                table = dict(data[sec]) if isinstance(data.get(sec), dict) else {}
                if value is None:
                    table.pop(key, None)
                else:
                    table[key] = value
                data[sec] = table
            elif kind < 0.8:
                item = rng.choice(["support", "load", "region", "case"])
                data[item] = [{rng.choice(["point", "segment", "box", "fix", "force",
                                           "keep", "circle", "name", "weight"]): value}]
            else:
                data[rng.choice(list(problem_module.TOP_KEYS))] = value
        try:
            parse_problem(data)
        except ProblemError as exc:
            assert exc.problems and all(isinstance(m, str) for m in exc.problems)


DOC = Path(__file__).parent.parent / "docs" / "problem-format.md"


def _doc_blocks(lang):
    text = DOC.read_text(encoding="utf-8")
    return [b.split("\n", 1)[1] for b in text.split("```")[1::2] if b.startswith(lang)]


def test_documented_example_parses(tmp_path):
    (example,) = _doc_blocks("toml")
    p = load_problem(write(tmp_path, example, "bracket.toml"))
    assert p.name == "Shop-sign wall bracket" and len(p.loads) == 2
    assert [c.name for c in p.cases] == ["hanging", "gust"]


def test_documented_error_output_is_what_the_reader_says(tmp_path):
    # The docs describe the example with three edits and show the messages it gives.
    (example,) = _doc_blocks("toml")
    bad = (example.replace("nu = 0.3", "nu = 0.55")
           .replace("thickness = 8.0 ", "thicknes = 8.0  ")
           .replace("point = [234, 10]", "point = [250, 10]"))
    shown = [line[len("error: "):] for line in _doc_blocks("text")[0].splitlines()]
    assert problems_of(tmp_path, bad) == shown


def test_documented_toml_error_is_what_the_reader_says(tmp_path, monkeypatch):
    (example,) = _doc_blocks("toml")
    monkeypatch.chdir(tmp_path)
    Path("bracket.toml").write_text(example.replace("nu = 0.3", "nu = = 0.3"),
                                    encoding="utf-8")
    with pytest.raises(ProblemError) as info:
        load_problem("bracket.toml")
    assert "error: " + info.value.problems[0] == _doc_blocks("text")[1].strip()


# Settings of the density-based (SIMP) and evolutionary (BESO) methods. Ranges: a SIMP
# penalty p = 1 is the variable-thickness sheet, p > 1 penalizes intermediate densities and
# p = 3 is the usual choice (Bendsoe and Sigmund 2003, Topology Optimization; from memory);
# evolution rate and admission ratio are fractions of the domain per iteration (Huang and
# Xie 2007, Finite Elem. Anal. Des. 43:1039-1049). The upper limits (p <= 10, rate <= 0.2)
# are common practice, no source.
BAD_METHOD = [
    ("penalty-low", make(method="[method]\npenalty = 0.5\n"), "method.penalty", "[1, 10]"),
    ("penalty-high", make(method="[method]\npenalty = 11\n"), "method.penalty", "got 11"),
    ("penalty-text", make(method='[method]\npenalty = "3"\n'), "method.penalty", None),
    ("filter-radius-zero", make(method="[method]\nfilter_radius = 0\n"),
     "method.filter_radius", "> 0 mm"),
    ("filter-name", make(method='[method]\nfilter = "densty"\n'), "method.filter",
     "did you mean 'density'"),
    ("projection-number", make(method="[method]\nprojection = 1\n"), "method.projection",
     "true or false"),
    ("projection-sensitivity", make(method='[method]\nname = "density"\nprojection = true\n'
                                           'filter = "sensitivity"\n'),
     "method.projection", 'filter = "density"'),
    ("evolution-rate-zero", make(method="[method]\nevolution_rate = 0\n"),
     "method.evolution_rate", "(0, 0.2]"),
    ("evolution-rate-high", make(method="[method]\nevolution_rate = 0.25\n"),
     "method.evolution_rate", "got 0.25"),
    ("admission-cap-high", make(method="[method]\nadmission_cap = 1.5\n"),
     "method.admission_cap", "(0, 1]"),
    ("method-name-simp", make(method='[method]\nname = "SIMP"\n'), "method.name",
     "did you mean 'density'"),
    ("method-name-beso", make(method='[method]\nname = "beso"\n'), "method.name",
     "did you mean 'evolutionary'"),
]


@pytest.mark.parametrize("text,key,fragment", [b[1:] for b in BAD_METHOD],
                         ids=[b[0] for b in BAD_METHOD])
def test_bad_method_setting_names_the_key(tmp_path, text, key, fragment):
    test_bad_input_names_the_key(tmp_path, text, key, fragment)


@pytest.mark.parametrize("name", ["density", "evolutionary", "levelset"])
def test_settings_of_every_method_parse_under_any_name(tmp_path, name):
    # One file runs with each method by changing the name: the other methods' keys are
    # checked and kept, and ignored by the method that runs (docs/problem-format.md).
    text = make(method=f'[method]\nname = "{name}"\npenalty = 4\nfilter_radius = 5.0\n'
                       'filter = "sensitivity"\nprojection = false\nevolution_rate = 0.03\n'
                       "admission_cap = 0.05\nsmoothing = 6.0\n")
    p = load_problem(write(tmp_path, text))
    assert p.method == Method(name=name, penalty=4.0, filter_radius=5.0, filter="sensitivity",
                              projection=False, evolution_rate=0.03, admission_cap=0.05,
                              smoothing=6.0)
    assert isinstance(p.method.penalty, float)
