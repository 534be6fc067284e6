"""Study-file keys and plain numbers: the helpers every reader of user input shares.

* `read_study_file`: bytes, text and parsed TOML of a study file, or one clear
  `InputError` (missing, unreadable, not UTF-8, malformed TOML with its line).
* `key_line`: the line of a study file where a dotted key such as
  ``observations[2].file`` is written, so a message can point at it.
* `check_keys`: refuse an unknown key, naming the nearest valid one.
* `parse_number`: the one rule for a number written as text, in an observation table,
  a survey sites file or a command-line value (see its docstring).

Standard library only: the command line imports this module at start.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Mapping
from pathlib import Path

from ..errors import InputError, suggest

__all__ = ["check_keys", "is_plain_number", "key_line", "parse_number", "read_study_file"]

_DECIMAL = re.compile(r"[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?[0-9]+)?")
_NAMED = ("nan", "inf", "infinity")  # read, so that a caller can refuse them by name


def is_plain_number(text: str) -> bool:
    """Whether `text` (stripped) is written as a plain decimal number.

    The rule: an optional sign, then digits with an optional decimal point (or a point
    and digits), then an optional exponent: ``1.5``, ``-2``, ``.5``, ``1e3``, ``+7.``.
    Not allowed: digit separators (``1_350``, ``6_5``), thousands commas, other scripts'
    digits, hexadecimal. ``nan`` and ``inf`` are recognised (any case, signed) so that
    a reader can refuse them with their own message.

    Examples
    --------
    >>> [is_plain_number(t) for t in ("1.5", "-2", ".5", "1e3", "1_350", "6_5", "NaN")]
    [True, True, True, True, False, False, True]
    """
    text = str(text).strip()
    return bool(_DECIMAL.fullmatch(text)) or text.lower().lstrip("+-") in _NAMED


def parse_number(text: str) -> float:
    """A float from text written as a plain decimal (`is_plain_number`), else ValueError.

    Python's ``float`` also reads ``1_350`` as 1350 and other scripts' digits; lidmelt
    refuses those everywhere, so that a cell or a command-line value means the same
    thing to every reader. NaN and infinity are returned as such (callers refuse them).

    Examples
    --------
    >>> parse_number(" 1350 "), parse_number("1.2e3")
    (1350.0, 1200.0)
    >>> parse_number("1_350")
    Traceback (most recent call last):
    ...
    ValueError: '1_350' is not a plain decimal number
    """
    if not is_plain_number(text):
        raise ValueError(f"{str(text).strip()!r} is not a plain decimal number")
    return float(str(text).strip())


_TOML_POS = re.compile(r"\(at line (\d+), column (\d+)\)")


def read_study_file(path: Path) -> tuple[bytes, str, dict]:
    """The bytes, text and parsed TOML of a study file (`InputError` if unreadable)."""
    try:
        if not path.is_file():
            why = "is a folder, not a study file" if path.is_dir() else "not found"
            raise InputError(f"study file {why}; check the path", file=path)
        raw = path.read_bytes()
    except OSError as err:  # e.g. no read permission on the file or its folder
        raise InputError(f"the study file cannot be read ({err.strerror}); check its "
                         "permissions", file=path) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise InputError(f"not UTF-8 text (byte {err.start}); save the study file as "
                         "UTF-8", file=path) from None
    return raw, text, _parse_toml(text, path)


def _parse_toml(text: str, path: Path) -> dict:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        message = str(err)
        match = _TOML_POS.search(message)
        line = int(match.group(1)) if match else None
        detail = _TOML_POS.sub("", message).strip().rstrip(".")
        column = f" (column {match.group(2)})" if match else ""
        raise InputError(
            f"malformed TOML{column}: {detail}; check quotes, brackets and 'key = value' "
            "syntax (https://toml.io)", file=path, line=line) from None


_HEADER = re.compile(r"^\[(\[?)\s*([^\[\]]+?)\s*\]\]?$")
_ASSIGN = re.compile(r"""^\s*("[^"]*"|'[^']*'|[A-Za-z0-9_\-.]+)\s*=""")


def key_line(text: str, dotted: str | None) -> int | None:
    """Line number of the TOML line that best matches a dotted key (None if no match).

    Keys of array-of-tables blocks are written ``observations[2].file`` (1-based). The
    line whose table header plus key is the longest prefix of `dotted` wins.
    """
    if not dotted:
        return None
    header, counts, best, best_len = "", {}, None, 0
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        head = _HEADER.match(line)
        if head:
            name = head.group(2)
            first, _, rest = name.partition(".")
            if head.group(1):  # [[array]] block
                counts[name] = counts.get(name, 0) + 1
                name = f"{name}[{counts[name]}]"
            elif rest and first in counts:  # [scenarios.parameters]: of the last block
                name = f"{first}[{counts[first]}].{rest}"
            header = candidate = name
        else:
            assign = _ASSIGN.match(line)
            if not assign:
                continue
            key = assign.group(1).strip("\"'")
            candidate = f"{header}.{key}" if header else key
        if (dotted == candidate or dotted.startswith(candidate + ".")) and \
                len(candidate) > best_len:
            best, best_len = number, len(candidate)
    return best


def check_keys(table: Mapping, valid: tuple[str, ...], where: str, *,
               what: str = "key") -> None:
    """Raise `InputError` for the first key of `table` not in `valid` (nearest one named).

    `where` is the dotted key of the table (``""`` at the top level); `what` names a key
    in the message (``"key"``, ``"section"``, ``"parameter"``).
    """
    for key in table:
        if key not in valid:
            dotted = f"{where}.{key}" if where else str(key)
            raise InputError(f"unknown {what} '{key}'" + suggest(str(key), valid), key=dotted)
