"""Helpers that word the reader's messages: key paths, numbers and values as a user wrote
them, and a spelling hint for a misspelt key or value.

Every message reads ``<key path>: <what was found and what would be valid>``.
"""
from __future__ import annotations

import difflib
import json
import math
import re

__all__ = ["HINT_SIMILARITY", "add_error", "join_key", "number_text", "point_text", "quoted_list",
           "show", "spelling_hint", "toml_error_message", "toml_repr"]

# Least difflib similarity (2 * matches / total length, case ignored) at which a valid name
# is offered as what the user meant; 0.75 still accepts one wrong letter in a word of four.
HINT_SIMILARITY = 0.75


def add_error(errs, path, text):
    """Add one message to ``errs``.

    Parameters
    ----------
    errs : list of str
        The messages collected so far; appended to.
    path : str
        The key path the message is about (``load[2].force``); "" for none.
    text : str
        What was found and what would be valid.
    """
    errs.append(f"{path}: {text}" if path else text)


def join_key(path, key):
    """The key path of ``key`` inside ``path``.

    Parameters
    ----------
    path : str
        The path of the table holding the key; "" at the top level.
    key : object
        The key; one that is no bare TOML key is quoted (``domain."my key"``).

    Returns
    -------
    str
    """
    key = str(key)
    if not re.fullmatch(r"[A-Za-z0-9_-]+", key):
        key = json.dumps(key, ensure_ascii=False)
    return f"{path}.{key}" if path else key


def number_text(x):
    """A number as a person would write it.

    Parameters
    ----------
    x : int or float

    Returns
    -------
    str
        A whole float without its ".0", anything else with 6 significant digits and no
        trailing zeros.
    """
    if isinstance(x, float) and x.is_integer() and abs(x) < 1e15:
        return str(int(x))
    return f"{x:.6g}"


def point_text(p):
    """A point as ``(x, y)``, each coordinate as :func:`number_text` writes it.

    Parameters
    ----------
    p : sequence of two numbers

    Returns
    -------
    str
    """
    return f"({number_text(p[0])}, {number_text(p[1])})"


def toml_repr(v, depth=0):
    """A parsed TOML value written back as the user would have typed it.

    Parameters
    ----------
    v : object
        A value from ``tomllib`` (bool, str, int, float, date/time, list or table).
    depth : int, optional
        Nesting level; tables inside arrays become ``{...}`` and arrays deeper than 3
        levels ``[...]``; arrays show their first 8 items.

    Returns
    -------
    str
    """
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return number_text(v)
    if isinstance(v, dict):
        return "a table" if depth == 0 else "{...}"
    if isinstance(v, (list, tuple)):
        if depth > 3:
            return "[...]"
        items = [toml_repr(x, depth + 1) for x in v[:8]]
        if len(v) > 8:
            items.append("...")
        return "[" + ", ".join(items) + "]"
    if hasattr(v, "isoformat"):
        return f"{v.isoformat()} (a date/time)"
    return repr(v)


def show(v, limit=70):
    """:func:`toml_repr` of ``v``, cut to ``limit`` characters with "...".

    Parameters
    ----------
    v : object
    limit : int, optional

    Returns
    -------
    str
    """
    s = toml_repr(v)
    return s if len(s) <= limit else s[: limit - 3] + "..."


def quoted_list(options):
    """The options quoted and joined for a sentence: ``"a", "b" or "c"``.

    Parameters
    ----------
    options : sequence of str
        At least one.

    Returns
    -------
    str
    """
    q = [f'"{o}"' for o in options]
    return q[0] if len(q) == 1 else ", ".join(q[:-1]) + " or " + q[-1]


def _edits(a, b):
    """Edit distance of two words: inserted, deleted or replaced letters and swaps of
    neighbouring letters (optimal string alignment)."""
    prev2, prev = None, list(range(len(b) + 1))
    for i in range(1, len(a) + 1):
        cur = [i] + [0] * len(b)
        for j in range(1, len(b) + 1):
            cur[j] = min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (a[i - 1] != b[j - 1]))
            if i > 1 and j > 1 and a[i - 1] == b[j - 2] and a[i - 2] == b[j - 1]:
                cur[j] = min(cur[j], prev2[j - 2] + 1)
        prev2, prev = prev, cur
    return prev[-1]


def spelling_hint(word, options):
    """A ``; did you mean 'x'?`` suffix for a misspelt key or value, or "" when no valid
    name is close.

    A name is close when it differs only in case, or its difflib similarity to ``word``
    (case ignored) is at least ``HINT_SIMILARITY``, or, for the short words where one
    wrong letter weighs more than the similarity allows, it is at most 1 edit away (words
    of 3 to 5 letters) or 2 edits away (6 to 8 letters; an edit inserts, deletes or
    replaces a letter or swaps two neighbours). So ``smothing`` gets 'smoothing' and
    ``fox`` 'fix', while ``repeat`` gets no hint (its nearest key, 'penalty', is 5 edits
    away at similarity 0.62).

    Parameters
    ----------
    word : object
        What the user wrote (converted with ``str``).
    options : sequence of str
        The valid names.

    Returns
    -------
    str
        The suffix naming the closest name (highest similarity; fewer edits, then the
        earlier option, break ties), or "".
    """
    word = str(word)
    low = word.lower()
    for o in options:
        if o.lower() == low:
            return f"; did you mean '{o}'?"
    n = len(low)
    max_edits = 1 if 3 <= n <= 5 else 2 if 6 <= n <= 8 else 0
    best, best_key = None, None
    for k, o in enumerate(options):
        ratio = difflib.SequenceMatcher(None, low, o.lower()).ratio()
        edits = _edits(low, o.lower())
        if ratio >= HINT_SIMILARITY or edits <= max_edits:
            key = (-ratio, edits, k)
            if best_key is None or key < best_key:
                best, best_key = o, key
    return f"; did you mean '{best}'?" if best is not None else ""


def toml_error_message(label, exc, text):
    """One message naming line and column of a TOML syntax error.

    Parameters
    ----------
    label : str
        The file as the user named it.
    exc : tomllib.TOMLDecodeError
        The parser's error.
    text : str
        The file's text, to quote the offending line.

    Returns
    -------
    str
        ``<label>, line L, column C: not valid TOML: <reason> (the line reads: ...)``.
    """
    msg = str(exc)
    line = getattr(exc, "lineno", None)
    col = getattr(exc, "colno", None)
    m = re.search(r"\s*\(at line (\d+), column (\d+)\)\s*$", msg)
    if m:
        line, col = int(m[1]), int(m[2])
        msg = msg[: m.start()]
    elif msg.rstrip().endswith("(at end of document)"):
        msg = msg.rstrip()[: -len("(at end of document)")].rstrip()
        lines = text.splitlines() or [""]
        line, col = len(lines), len(lines[-1]) + 1
    msg = getattr(exc, "msg", None) or msg
    where = f", line {line}, column {col}" if line else ""
    shown = ""
    if line:
        lines = text.splitlines()
        if 0 < line <= len(lines) and lines[line - 1].strip():
            src = lines[line - 1].strip()
            shown = f" (the line reads: {src if len(src) <= 60 else src[:57] + '...'})"
    return f"{label}{where}: not valid TOML: {msg[:1].lower()}{msg[1:]}{shown}"
