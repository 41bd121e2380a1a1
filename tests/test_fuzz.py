"""Property-based fuzzing (hypothesis): the loader and the command line never end in a
traceback, whatever they are fed."""
from __future__ import annotations

import math

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from levelform.cli import main
from levelform.problem.reader import parse_problem
from levelform.spec import Problem, ProblemError

KEYS = ["units", "material", "domain", "support", "load", "case", "region", "goal", "method", "fabrication",
        "E", "nu", "thickness", "outline", "holes", "cell", "point", "segment", "box", "fix", "force",
        "force_per_length", "keep", "circle", "polygon", "material", "name", "weight", "smoothing", "iterations",
        "pads", "length", "min_member", "min_hole"]

scalars = st.one_of(
    st.none(), st.booleans(), st.integers(-10**6, 10**6),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=8),
)
values = st.recursive(
    scalars,
    lambda inner: st.one_of(
        st.lists(inner, max_size=5),
        st.dictionaries(st.sampled_from(KEYS) | st.text(max_size=6), inner, max_size=5),
    ),
    max_leaves=25,
)
documents = st.dictionaries(st.sampled_from(KEYS), values, max_size=8)

GOOD = {
    "material": {"E": 1000.0, "nu": 0.3, "thickness": 1.0},
    "domain": {"outline": [[0, 0], [40, 0], [40, 20], [0, 20]], "cell": 2.0},
    "support": [{"segment": [[0, 0], [0, 20]], "fix": "xy"}],
    "load": [{"point": [40, 10], "force": [0, -1]}],
    "goal": {"material": 0.5},
}


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(documents)
def test_loader_returns_a_problem_or_a_problem_error(doc):
    try:
        p = parse_problem(doc)
    except ProblemError as exc:
        assert exc.problems and all(isinstance(m, str) and m for m in exc.problems)
    else:
        assert isinstance(p, Problem)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(["material", "domain", "support", "load", "goal"]), st.text(max_size=6) | st.sampled_from(KEYS), values)
def test_one_corrupted_key_of_a_good_problem(section, key, value):
    doc = {k: (list(v) if isinstance(v, list) else dict(v)) for k, v in GOOD.items()}
    target = doc[section][0] if isinstance(doc[section], list) else doc[section]
    target[key] = value
    try:
        p = parse_problem(doc)
    except ProblemError as exc:
        assert exc.problems
    else:
        assert isinstance(p, Problem)
        assert all(math.isfinite(v) for v in (p.material.E, p.material.nu, p.material.thickness, p.domain.cell))


argv_items = st.sampled_from(["run", "check", "demo", "--method", "density", "-o", "--overwrite", "--resume",
                              "-q", "--help", "nonexistent.toml", "", "--", "-x", "levelset"]) | st.text(max_size=10)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(st.lists(argv_items, max_size=5))
def test_command_line_never_tracebacks(tmp_path, capsys, argv):
    if argv and argv[0] == "demo":
        argv = ["check", *argv[1:]]  # the demo writes and runs a real problem: keep fuzzing cheap
    if "run" in argv:
        argv = [a if a != "run" else "check" for a in argv]
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse's own exits (usage errors 2, --help 0)
        code = exc.code
    out = capsys.readouterr()
    assert code in (0, 1, 2, None)
    assert "Traceback" not in out.err and "Traceback" not in out.out
    if code == 1:
        raise AssertionError(f"internal failure for argv {argv!r}: {out.err}")


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(st.binary(max_size=300) | st.text(max_size=300))
def test_check_on_garbage_files(tmp_path, capsys, content):
    path = tmp_path / "fuzz.toml"
    path.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8", "replace"))
    code = main(["check", str(path)])
    err = capsys.readouterr().err
    assert code in (0, 2)
    assert "Traceback" not in err
