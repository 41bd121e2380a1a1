"""Checkpoints of a running optimization: a plain npz file (no pickles) written to a
temporary file and renamed, so a crash never leaves a half-written checkpoint."""
from __future__ import annotations

import hashlib
import json
import os
import tempfile
from pathlib import Path

import numpy as np

from ..spec import ProblemError
from ..version import __version__

FILE_NAME = "checkpoint.npz"


def fingerprint(problem) -> str:
    """Identifies the problem and method a checkpoint belongs to."""
    text = json.dumps({"raw": problem.raw, "method": problem.method.name, "version": __version__},
                      sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


class CheckpointFile:
    """``load()`` and ``save(arrays)`` for a method loop, backed by ``outdir/checkpoint.npz``."""

    def __init__(self, outdir, problem):
        self.path = Path(outdir) / FILE_NAME
        self.key = fingerprint(problem)

    def exists(self) -> bool:
        return self.path.is_file()

    def load(self):
        if not self.path.is_file():
            return None
        try:
            with np.load(self.path, allow_pickle=False) as data:
                arrays = {k: data[k] for k in data.files}
        except (OSError, ValueError) as exc:
            raise ProblemError([f"--resume: the checkpoint {self.path} cannot be read ({exc}); start again with --overwrite"])
        if str(arrays.pop("fingerprint", "")) != self.key:
            raise ProblemError([
                f"--resume: the checkpoint in {self.path.parent} belongs to another problem file, method or "
                "levelform version; start again with --overwrite"
            ])
        return arrays

    def save(self, arrays: dict) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".checkpoint-", suffix=".npz", dir=self.path.parent)
        try:
            with os.fdopen(fd, "wb") as f:
                np.savez(f, fingerprint=np.array(self.key), **arrays)
                f.flush()
                os.fsync(f.fileno())
            os.replace(tmp, self.path)
        except BaseException:
            if os.path.exists(tmp):
                os.unlink(tmp)
            raise

    def remove(self) -> None:
        if self.path.is_file():
            self.path.unlink()
