"""Interrupted runs lose nothing: SIGKILL then --resume gives the uninterrupted result; Ctrl-C
(SIGINT) writes the current design with status "interrupted" and exits 130."""
from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import shapely

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
PROBLEM = EXAMPLES / "mbb_half_beam.toml"


def _cmd(*args):
    return [sys.executable, "-m", "levelform.cli", *args]


def _start_and_wait_for_checkpoint(out: Path):
    proc = subprocess.Popen(_cmd("run", str(PROBLEM), "-o", str(out), "-q"),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    ckpt = out / "checkpoint.npz"
    while not ckpt.exists():
        if proc.poll() is not None or time.monotonic() > deadline:
            proc.kill()
            pytest.fail(f"no checkpoint appeared (exit {proc.returncode})")
        time.sleep(0.05)
    return proc


def _outline(out: Path):
    data = json.loads((out / "outline.geojson").read_text())
    feats = [f for f in data["features"] if f["properties"].get("role", f["properties"].get("kind")) == "material"]
    geom = feats[0]["geometry"] if feats else data["features"][0]["geometry"]
    return shapely.geometry.shape(geom)


@pytest.fixture(scope="module")
def uninterrupted(tmp_path_factory):
    out = tmp_path_factory.mktemp("whole") / "out"
    res = subprocess.run(_cmd("run", str(PROBLEM), "-o", str(out), "-q"), capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    assert not (out / "checkpoint.npz").exists()  # removed after a finished run
    return out


def test_sigkill_then_resume_matches_uninterrupted_run(tmp_path, uninterrupted):
    out = tmp_path / "out"
    proc = _start_and_wait_for_checkpoint(out)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert not (out / "summary.json").exists()
    # Without --resume the unfinished run is protected.
    res = subprocess.run(_cmd("run", str(PROBLEM), "-o", str(out), "-q"), capture_output=True, text=True)
    assert res.returncode == 2 and "--resume" in res.stderr
    res = subprocess.run(_cmd("run", str(PROBLEM), "-o", str(out), "-q", "--resume"), capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    a = json.loads((uninterrupted / "summary.json").read_text())
    b = json.loads((out / "summary.json").read_text())
    assert b["compliance"] == pytest.approx(a["compliance"], rel=1e-12)
    assert b["iterations"] == a["iterations"]
    assert (out / "outline.geojson").read_bytes() == (uninterrupted / "outline.geojson").read_bytes()
    assert (out / "outline.dxf").read_bytes() == (uninterrupted / "outline.dxf").read_bytes()


def test_sigint_writes_current_design_and_exits_130(tmp_path, uninterrupted):
    out = tmp_path / "out"
    proc = _start_and_wait_for_checkpoint(out)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "Traceback" not in err
    summary = json.loads((out / "summary.json").read_text())
    assert summary["status"] == "interrupted"
    assert (out / "outline.dxf").is_file() and (out / "checkpoint.npz").is_file()
    res = subprocess.run(_cmd("run", str(PROBLEM), "-o", str(out), "-q", "--resume"), capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    done = json.loads((out / "summary.json").read_text())
    assert done["compliance"] == pytest.approx(json.loads((uninterrupted / "summary.json").read_text())["compliance"], rel=1e-12)


def test_resume_refuses_another_problem(tmp_path):
    out = tmp_path / "out"
    proc = _start_and_wait_for_checkpoint(out)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    other = tmp_path / "other.toml"
    other.write_text(PROBLEM.read_text().replace("material = 0.5", "material = 0.4"))
    res = subprocess.run(_cmd("run", str(other), "-o", str(out), "-q", "--resume"), capture_output=True, text=True)
    assert res.returncode == 2 and "another problem" in res.stderr
