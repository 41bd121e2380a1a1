"""Atomic file writes (temporary file, then rename) and JSON text of plain values."""
from __future__ import annotations

import contextlib
import dataclasses
import json
import math
import os
import tempfile
from pathlib import Path

import numpy as np

# --------------------------------------------------------------------------- writing

def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write_bytes(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` via a temporary file in the same folder and os.replace.

    Readers see either the old file or the complete new one; on any error the temporary
    file is removed and the exception propagates.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual mode
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return path


def atomic_write_text(path, text: str, encoding: str = "utf-8") -> Path:
    """Atomically write ``text`` (``\\n`` line ends, no platform translation)."""
    return atomic_write_bytes(path, text.encode(encoding))


def jsonable(obj):
    """Plain JSON values: NaN/inf -> None, numpy -> Python, tuples -> lists."""
    if isinstance(obj, bool) or obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set, frozenset)):
        items = sorted(obj, key=str) if isinstance(obj, (set, frozenset)) else obj
        return [jsonable(v) for v in items]
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return jsonable(dataclasses.asdict(obj))
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    return str(obj)


def json_text(obj) -> str:
    """Deterministic JSON: sorted keys, indent 2, non-finite floats as null."""
    return json.dumps(jsonable(obj), sort_keys=True, indent=2, allow_nan=False,
                      ensure_ascii=False) + "\n"


def write_json(path, obj) -> Path:
    """Atomically write ``obj`` as deterministic JSON (see :func:`json_text`)."""
    return atomic_write_text(path, json_text(obj))
