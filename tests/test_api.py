"""The top-level Python API (levelform.load_problem / optimize / export / verify / compare):
each is the documented route to the same figures the submodules give."""
import dataclasses

import pytest
from conftest import SMALL_PLATE_TOML

import levelform
from levelform.bodyfitted.check import verify_outline
from levelform.methods import method_names


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    path = tmp_path_factory.mktemp("api") / "p.toml"
    path.write_text(SMALL_PLATE_TOML, encoding="utf-8")
    problem = levelform.load_problem(path)
    seen = []
    result = levelform.optimize(problem, progress=seen.append)
    return problem, result, seen


def test_optimize_reports_progress_and_export_refuses_a_full_folder(run, tmp_path):
    problem, result, seen = run
    assert [r.iteration for r in seen] == list(range(1, len(seen) + 1)) and len(seen) == result.iterations
    files = levelform.export(result, tmp_path / "out")
    assert (tmp_path / "out" / "summary.json") in files.values()
    with pytest.raises(levelform.ProblemError, match="overwrite"):
        levelform.export(result, tmp_path / "out")
    assert levelform.export(result, tmp_path / "out", overwrite=True).keys() == files.keys()


def test_verify_is_the_body_fitted_check(run):
    problem, result, _ = run
    v = levelform.verify(problem, result.outline, grid_compliance=result.compliance)
    ref = verify_outline(problem, result.outline, grid_compliance=result.compliance)
    assert v.ok and v.compliance == ref.compliance and v.elements == ref.elements
    assert v.compliance > 0.0


def test_compare_runs_the_registered_methods(run):
    problem, _, _ = run
    short = dataclasses.replace(problem, method=dataclasses.replace(problem.method, iterations=8))
    table = levelform.compare(short, methods="levelset,density")
    assert table.methods == ("levelset", "density")
    assert table.rows["levelset"]["ratio_to_levelset"] == pytest.approx(1.0)
    assert set(method_names()) >= set(table.methods)
    with pytest.raises(levelform.ProblemError, match="unknown method"):
        levelform.compare(short, methods="simulated-annealing")


def test_comparison_says_which_outlines_meet_the_fabrication_limits(run):
    # Only the level set shapes its design to [fabrication] limits; the comparison measures
    # every outline against them (geometry.measure.fabrication_report) and the report says so.
    from levelform.io.report import report_html
    from levelform.spec import Fabrication

    problem, _, _ = run
    limited = dataclasses.replace(problem, fabrication=Fabrication(min_member=4.0),
                                  method=dataclasses.replace(problem.method, iterations=8))
    table = levelform.compare(limited, methods="levelset,density")
    for m in table.methods:
        row = table.rows[m]
        assert isinstance(row["limits_met"], bool)
        assert set(row["limits"]) == {"min_member"}
        measured = row["limits"]["min_member"]
        assert row["limits_met"] == (measured is not None and measured >= 4.0 * (1 - 1e-3))
    html = report_html(table, overview_png=b"\x89PNG\r\n\x1a\n")
    assert "fabrication limits met (min_member)" in html and "only the level-set method shapes" in html
    free = levelform.compare(dataclasses.replace(limited, fabrication=Fabrication()), methods="density")
    assert free.rows["density"]["limits_met"] is None
