"""The levelform command line: demo, run, check, and bad input (exit 2, key named, nothing written)."""
from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import SMALL_PLATE_TOML

from levelform.cli import main

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
OUTPUTS = {"outline.svg", "outline.dxf", "outline.geojson", "design.png", "history.png", "history.csv", "summary.json"}

SMALL = SMALL_PLATE_TOML


def _write(tmp_path, text, name="p.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_demo_writes_problem_and_results(tmp_path, capsys):
    assert main(["demo", str(tmp_path / "d"), "-q"]) == 0
    out = capsys.readouterr().out
    assert (tmp_path / "d" / "sign_bracket.toml").is_file()
    assert OUTPUTS <= {p.name for p in (tmp_path / "d" / "results").iterdir()}
    assert "results in" in out and "licensed engineer" in out


def test_run_prints_progress_summary_and_caution(tmp_path, capsys):
    prob = _write(tmp_path, SMALL)
    out_dir = tmp_path / "out"
    assert main(["run", str(prob), "-o", str(out_dir)]) == 0
    out = capsys.readouterr().out
    assert "iter    1" in out and "compliance" in out and "material" in out
    assert "not a code check" in out
    summary = json.loads((out_dir / "summary.json").read_text())
    for key in ("compliance", "material_fraction", "iterations", "converged", "seconds", "outline_area",
                "holes", "units", "settings", "software"):
        assert key in summary
    assert summary["units"]["length"] == "mm"


def test_existing_output_folder_is_not_overwritten_without_flag(tmp_path, capsys):
    prob = _write(tmp_path, SMALL)
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    keep = out_dir / "notes.txt"
    keep.write_text("mine")
    assert main(["run", str(prob), "-o", str(out_dir), "-q"]) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert sorted(p.name for p in out_dir.iterdir()) == ["notes.txt"]
    assert main(["run", str(prob), "-o", str(out_dir), "-q", "--overwrite"]) == 0
    assert keep.read_text() == "mine"


def test_check_reports_size_without_solving(tmp_path, capsys):
    assert main(["check", str(EXAMPLES / "mbb_half_beam.toml")]) == 0
    out = capsys.readouterr().out
    assert "120 x 40 cells" in out and "degrees of freedom" in out and "memory estimate" in out


BAD = [
    ("material.E", SMALL.replace("E = 1000.0", "E = -5.0")),
    ("material.nu", SMALL.replace("nu = 0.3", "nu = 0.5")),
    ("material.thickness", SMALL.replace("thickness = 1.0", "thickness = 0")),
    ("goal.material", SMALL.replace("material = 0.5", "material = 1.2")),
    ("material.thicknes", SMALL.replace("thickness = 1.0", "thicknes = 1.0")),
    ("domain.outline", SMALL.replace("[[0, 0], [40, 0], [40, 20], [0, 20]]", "[[0, 0], [40, 20], [40, 0], [0, 20]]")),
    ("load[1]", SMALL.replace("point = [40, 10]", "point = [90, 10]")),
    ("support", SMALL.replace('fix = "xy"', 'fix = "x"')),
    ("domain.cell", SMALL.replace("cell = 2.0", "cell = 8.0")),
    ("material.E", SMALL.replace("E = 1000.0", "E = nan")),
    ("method.iterations", SMALL.replace("iterations = 30", "iterations = 2.5")),
]


@pytest.mark.parametrize("key,text", BAD, ids=[b[0] + str(i) for i, b in enumerate(BAD)])
def test_bad_input_exit_2_names_key_and_writes_nothing(tmp_path, capsys, key, text):
    prob = _write(tmp_path, text)
    out_dir = tmp_path / "out"
    assert main(["run", str(prob), "-o", str(out_dir)]) == 2
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert lines and all(ln.startswith("error: ") for ln in lines)
    assert any(key in ln for ln in lines)
    assert "Traceback" not in err
    assert not out_dir.exists()
    assert main(["check", str(prob)]) == 2


def test_several_problems_reported_together(tmp_path, capsys):
    text = SMALL.replace("E = 1000.0", "E = -1.0").replace("nu = 0.3", "nu = 0.7").replace("material = 0.5", "material = 0")
    assert main(["check", str(_write(tmp_path, text))]) == 2
    err = capsys.readouterr().err
    for key in ("material.E", "material.nu", "goal.material"):
        assert key in err


def test_unknown_method_and_missing_file(tmp_path, capsys):
    prob = _write(tmp_path, SMALL)
    assert main(["run", str(prob), "--method", "nonsense", "-o", str(tmp_path / "o")]) == 2
    assert "--method" in capsys.readouterr().err
    assert main(["check", str(tmp_path / "missing.toml")]) == 2
    assert "missing.toml" in capsys.readouterr().err


def test_console_script_help_and_version():
    # The installed entry point (pyproject [project.scripts]) and the module form agree.
    res = subprocess.run([sys.executable, "-m", "levelform.cli", "--help"], capture_output=True, text=True)
    assert res.returncode == 0
    for word in ("demo", "run", "check", "licensed engineer"):
        assert word in res.stdout
    res = subprocess.run([sys.executable, "-m", "levelform.cli", "--version"], capture_output=True, text=True)
    assert res.returncode == 0 and "levelform" in res.stdout


def test_two_runs_give_byte_identical_outline_files(tmp_path):
    prob = _write(tmp_path, SMALL)
    for out in ("a", "b"):
        assert main(["run", str(prob), "-o", str(tmp_path / out), "-q"]) == 0
    for name in ("outline.svg", "outline.dxf", "outline.geojson", "history.csv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes(), name


def test_verify_a_results_folder_and_an_edited_outline(tmp_path, capsys):
    prob = _write(tmp_path, SMALL)
    out = tmp_path / "out"
    assert main(["run", str(prob), "-o", str(out), "-q", "--no-verify"]) == 0
    assert not (out / "verify.json").exists()
    assert main(["verify", str(out)]) == 0
    record = json.loads((out / "verify.json").read_text())
    for key in ("compliance", "max_von_mises", "max_displacement", "mesh_size", "elements"):
        assert key in record
    assert "licensed engineer" in capsys.readouterr().out
    # An outline from CAD (here the exported DXF) checked against the problem file.
    checked = tmp_path / "checked"
    assert main(["verify", str(prob), "--outline", str(out / "outline.dxf"), "-o", str(checked)]) == 0
    assert (checked / "stress.png").is_file() and (checked / "verify.vtu").is_file()
    capsys.readouterr()
    assert main(["verify", str(prob)]) == 2
    assert "--outline" in capsys.readouterr().err
    assert main(["verify", str(prob), "--outline", str(tmp_path / "nope.dxf")]) == 2
    assert "nope.dxf" in capsys.readouterr().err


def test_verify_keeps_an_earlier_check_and_reproduces_the_runs_own_figures(tmp_path, capsys):
    prob = _write(tmp_path, SMALL)
    out = tmp_path / "out"
    assert main(["run", str(prob), "-o", str(out), "-q"]) == 0  # with its own body-fitted check
    before = {name: (out / name).read_bytes() for name in ("verify.json", "stress.png", "verify.vtu")}
    capsys.readouterr()
    # Not asked to: refused, exit 2, the folder named, the way out given, nothing touched.
    assert main(["verify", str(out)]) == 2
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ") and str(out) in lines[0]
    assert "--overwrite" in lines[0] and "-o" in lines[0]
    assert {name: (out / name).read_bytes() for name in before} == before
    # Asked to: the check of the outline file gives the run's own figures exactly (the run
    # checked the outline as written, not the unrounded one in memory).
    run_record = json.loads(before["verify.json"])
    assert main(["verify", str(out), "--overwrite"]) == 0
    again = json.loads((out / "verify.json").read_text())
    for key in ("elements", "nodes", "vertices", "compliance", "case_compliance", "max_von_mises",
                "max_von_mises_at", "max_displacement", "area", "grid_compliance", "relative_difference"):
        assert again[key] == run_record[key], key
    # Another folder needs no flag.
    assert main(["verify", str(out), "-o", str(tmp_path / "elsewhere")]) == 0
    assert json.loads((tmp_path / "elsewhere" / "verify.json").read_text())["compliance"] == run_record["compliance"]


def test_verify_says_what_it_read_from_a_dxf_of_lines(tmp_path, capsys):
    import ezdxf

    prob = _write(tmp_path, SMALL)
    doc = ezdxf.new("R2010")
    msp = doc.modelspace()
    corners = [(0, 0), (40, 0), (40, 20), (0, 20)]
    for a, b in zip(corners, corners[1:] + corners[:1]):
        msp.add_line(a, b)
    msp.add_circle((20, 10), 4.0)
    msp.add_text("plate, 1 bore", dxfattribs={"insert": (5, 25), "layer": "NOTES"})
    msp.add_line((50, 0), (55, 5))
    doc.saveas(tmp_path / "lines.dxf")
    checked = tmp_path / "checked"
    assert main(["verify", str(prob), "--outline", str(tmp_path / "lines.dxf"), "-o", str(checked)]) == 0
    cap = capsys.readouterr()
    assert "lines.dxf: read 2 closed rings from 1 CIRCLE, 4 LINE: 1 solid piece with 1 hole" in cap.out
    err = cap.err.splitlines()
    assert any(ln.startswith("warning: lines.dxf: ignored 1 TEXT entity") and "layer NOTES" in ln for ln in err)
    assert any(ln.startswith("warning: lines.dxf: LINE") and "from (50, 0) to (55, 5) was left open" in ln
               for ln in err)
    # The plate with its bore was checked: area 40 x 20 less the circle's, pi r^2, up to the
    # chords (sagitta FLATTEN times the drawing's 55 width; segments cut off at most 2 pi r d).
    from levelform.io.outline_read import FLATTEN

    area = json.loads((checked / "verify.json").read_text())["area"]
    exact = 800 - math.pi * 16
    assert 0.0 <= area - exact <= 2 * math.pi * 4 * FLATTEN * 55
    # Nothing usable: exit 2, error lines naming the file, nothing written.
    doc = ezdxf.new("R2010")
    doc.modelspace().add_line((0, 0), (40, 0))
    doc.saveas(tmp_path / "bare.dxf")
    assert main(["verify", str(prob), "--outline", str(tmp_path / "bare.dxf"), "-o", str(tmp_path / "none")]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "bare.dxf: no closed outline found" in err and "Traceback" not in err
    assert not (tmp_path / "none").exists()


def test_run_help_names_the_default_folder_after_the_file(capsys):
    with pytest.raises(SystemExit):
        main(["run", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "<problem file name>-results next to the file" in text


def test_overwrite_without_verify_removes_the_earlier_check(tmp_path):
    # The body-fitted files of an earlier run describe another outline: an overwriting run
    # that skips the check must not leave them beside its own outline.
    prob = _write(tmp_path, SMALL)
    out = tmp_path / "out"
    assert main(["run", str(prob), "-o", str(out), "-q"]) == 0
    assert (out / "verify.json").is_file()
    assert main(["run", str(prob), "-o", str(out), "-q", "--overwrite", "--no-verify"]) == 0
    assert (out / "summary.json").is_file()
    assert not any((out / name).exists() for name in ("verify.json", "stress.png", "verify.vtu"))
