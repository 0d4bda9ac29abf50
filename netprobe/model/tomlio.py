"""Reading the TOML files of netprobe (model and study files) with one-line errors.

:func:`read_text` checks that a path names a regular readable file and decodes it as UTF-8 (a bad
byte is named with its offset); :func:`parse_toml` parses the text, refuses nesting deeper than our
layouts use and numbers that are not finite, so that later stages only see tables, lists, strings,
booleans and finite numbers. :func:`check_keys` and :func:`main_table` check the keys of a table
the same way for every kind of file: an unknown key is an error that lists the valid ones.
"""

from __future__ import annotations

import math
import os
import stat
import tomllib
from pathlib import Path

from netprobe.errors import SpecError

__all__ = ["MAX_DEPTH", "read_text", "parse_toml", "describe_path_problem", "check_keys", "main_table"]

#: Deepest nesting of tables and lists that a model or study file may use (ours use at most 3).
MAX_DEPTH = 8


def describe_path_problem(path: Path) -> str | None:
    """Why ``path`` is not a regular readable file, or None if it is one (or nothing is there).

    Returns
    -------
    str or None
        E.g. "is a folder", "is a symbolic link that loops", "is a named pipe (FIFO)".
    """
    try:
        info = os.stat(path)
    except FileNotFoundError:
        return "is a broken symbolic link" if os.path.islink(path) else None
    except OSError as err:
        if err.errno is not None and os.strerror(err.errno).lower().startswith("too many levels"):
            return "is a symbolic link that loops"
        return f"cannot be examined ({err.strerror or err})"
    mode = info.st_mode
    if stat.S_ISREG(mode):
        return None if os.access(path, os.R_OK) else "is not readable (permission denied)"
    kinds = [(stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a named pipe (FIFO)"), (stat.S_ISSOCK, "a socket"),
             (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device")]
    kind = next((name for test, name in kinds if test(mode)), "not a regular file")
    return f"is {kind}, not a regular file"


def read_text(path, what: str) -> str:
    """The text of a ``what`` file (model, study), decoded as UTF-8.

    Raises
    ------
    SpecError
        If the path is not a regular readable file, cannot be read, or is not valid UTF-8 (the
        message gives the byte offset of the first bad byte).
    """
    path = Path(path)
    problem = describe_path_problem(path)
    if problem is not None:
        raise SpecError(f"{what} file {path} {problem}; give the path of a {what} file (TOML)")
    try:
        data = path.read_bytes()
    except OSError as err:
        raise SpecError(
            f"cannot read {what} file {path} ({err.strerror or err}); check that it is readable") from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as err:
        line = data.count(b"\n", 0, err.start) + 1
        raise SpecError(
            f"{what} file {path} is not valid UTF-8: byte 0x{data[err.start]:02x} at byte offset {err.start} "
            f"(line {line}) {err.reason}; save the file as UTF-8"
        ) from None


def parse_toml(text: str, where: str) -> dict:
    """Parse TOML text into a table of plain values, checked for depth and finite numbers.

    Parameters
    ----------
    text : str
    where : str
        Names the file in messages ("model file x.toml").

    Raises
    ------
    SpecError
        For malformed TOML, nesting deeper than :data:`MAX_DEPTH`, or a number that is NaN or
        infinite (including literals such as 1e400 that overflow).
    """
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise SpecError(f"{where}: not valid TOML ({err}); fix the syntax at the place named") from None
    except RecursionError:
        raise SpecError(
            f"{where}: the TOML nests lists or tables far too deeply; model and study files nest at most "
            f"{MAX_DEPTH} levels") from None
    _check_values(raw, where)
    return raw


def check_keys(table, allowed, where: str, what: str) -> None:
    """Refuse a value that is not a table, and any key of ``table`` not in ``allowed``.

    Raises
    ------
    SpecError
        Naming ``where`` and ``what`` (``"[study]"``, ``"the top level"``) and listing the valid keys.
    """
    if not isinstance(table, dict):
        raise SpecError(f"{where}: {what} must be a table")
    for key in table:
        if key not in allowed:
            raise SpecError(f"{where}: unknown key '{key}' in {what}; valid keys: {', '.join(sorted(allowed))}")


def main_table(raw: dict, top_keys, name: str, keys, where: str, needs: str) -> dict:
    """The table ``[name]`` of a parsed file, after checking the top-level keys and its own.

    ``needs`` says in the message for a missing table what it must hold ("name and site").
    """
    check_keys(raw, top_keys, where, "the top level")
    table = raw.get(name)
    if not isinstance(table, dict):
        raise SpecError(f"{where}: missing [{name}] table with at least {needs}")
    check_keys(table, keys, where, f"[{name}]")
    return table


def _check_values(raw: dict, where: str) -> None:
    """Walk the parsed tree without recursion; refuse deep nesting and non-finite numbers."""
    stack = [(raw, "", 1)]
    while stack:
        node, name, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise SpecError(
                f"{where}: '{name}' nests more than {MAX_DEPTH} levels of lists or tables; model and study "
                "files use plain tables of values")
        items = node.items() if isinstance(node, dict) else enumerate(node)
        for key, value in items:
            if not name:
                label = str(key)
            else:
                label = f"{name}.{key}" if isinstance(key, str) else f"{name}[{key}]"
            if isinstance(value, float) and not math.isfinite(value):
                raise SpecError(
                    f"{where}: {label} = {value} is not a finite number; give a finite value (a number "
                    "written like 1e400 overflows to infinity)")
            if isinstance(value, (dict, list)):
                stack.append((value, label, depth + 1))
