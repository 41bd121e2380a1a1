"""The corpus of bad problem files in tests/bad_inputs/: through the command line each one
exits with status 2, prints one `error:` line per problem naming the key, and writes nothing."""
from __future__ import annotations

from pathlib import Path

import pytest

from levelform.cli import main

BAD_DIR = Path(__file__).parent / "bad_inputs"
FILES = sorted(BAD_DIR.glob("*.toml"))


def _expected(path: Path) -> list[str]:
    first = path.read_text(encoding="utf-8").splitlines()[0]
    assert first.startswith("# expect:"), path
    return [k.strip() for k in first[len("# expect:"):].split(",") if k.strip()]


def test_the_corpus_is_large_and_distinct():
    texts = {p.read_text(encoding="utf-8").split("\n", 2)[2] for p in FILES}
    assert len(FILES) >= 60 and len(texts) == len(FILES)


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
@pytest.mark.parametrize("command", ["run", "check"])
def test_bad_file_exit_2_named_key_nothing_written(path, command, tmp_path, capsys):
    out = tmp_path / "results"
    argv = ["run", str(path), "-o", str(out), "-q"] if command == "run" else ["check", str(path)]
    assert main(argv) == 2
    captured = capsys.readouterr()
    lines = [ln for ln in captured.err.splitlines() if ln.strip()]
    assert lines and all(ln.startswith("error: ") for ln in lines), captured.err
    assert len(lines) == len(set(lines))  # one message per problem, none repeated
    for key in _expected(path):
        assert any(key in ln for ln in lines), (key, captured.err)
    assert "Traceback" not in captured.err + captured.out
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == []
