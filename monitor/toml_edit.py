"""Edit one table of a TOML file as text, leaving every other line (and its comments) as it was.

The config files are written by people and carry comments; round-tripping them through a TOML
writer would drop those. These helpers replace the value of ``key = value`` lines inside one
``[table]`` (keeping a trailing ``# comment``), add missing keys at the end of that table, or
append the table when the file has none. The result is checked by parsing it with ``tomllib``.
"""

from __future__ import annotations

import json
import re
import tomllib
from datetime import date

__all__ = ["TomlEditError", "set_table_values", "toml_value", "unit_of", "table_path"]


class TomlEditError(ValueError):
    """The file cannot be edited safely as text (the message says where)."""


_NUMBER_PREFIX = re.compile(r"^\s*[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?\s*")
_VALUE = re.compile(r"""^("(?:[^"\\\n]|\\.)*"|'[^'\n]*'|[^#\n]*?)(\s*(?:#.*)?)$""")


def unit_of(text: str) -> str:
    """The unit part of a quantity string: ``"7.8e-3 kg/h/A"`` -> ``"kg/h/A"``."""
    m = _NUMBER_PREFIX.match(text)
    return text[m.end():].strip() if m else text.strip()


def toml_value(value: object) -> str:
    """A TOML literal for a str, bool, int, float, date or list of numbers."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)  # a JSON string is a valid TOML basic string
    if isinstance(value, date):
        return value.isoformat()
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"no TOML literal for {type(value).__name__}")


def table_path(line: str) -> tuple[str, ...] | None:
    """The key path of a ``[a."b"]`` header line, or None when the line is not a table header."""
    s = line.strip()
    if not s.startswith("[") or s.startswith("[["):
        return None
    try:
        d = tomllib.loads(s + "\n")
    except tomllib.TOMLDecodeError:
        return None
    path: list[str] = []
    while isinstance(d, dict) and len(d) == 1:
        k = next(iter(d))
        path.append(k)
        d = d[k]
    return tuple(path)


def _header_text(path: tuple[str, ...]) -> str:
    parts = [p if re.fullmatch(r"[A-Za-z0-9_-]+", p) else json.dumps(p) for p in path]
    return "[" + ".".join(parts) + "]"


def set_table_values(text: str, path: tuple[str, ...], values: dict[str, object], file: str = "TOML") -> str:
    """Set ``values`` (key -> Python value) in the table at ``path`` of TOML ``text``.

    Lines of that table whose key is in ``values`` get the new value (a trailing comment stays);
    keys the table lacks are added after its last key line; a missing table is appended at the
    end of the file. Nothing outside the table changes. Raises :class:`TomlEditError` when a key
    to replace spans several lines, or when the result is not valid TOML.
    """
    nl = "\r\n" if "\r\n" in text else "\n"
    lines = text.splitlines(keepends=True)
    start = next((k for k, line in enumerate(lines) if table_path(line) == path), None)
    todo = dict(values)
    if start is None:
        if lines and not lines[-1].endswith(("\n", "\r")):
            lines[-1] += nl
        block = [nl, _header_text(path) + nl] + [f"{k} = {toml_value(v)}{nl}" for k, v in todo.items()]
        out = "".join(lines + block)
    else:
        end = next((k for k in range(start + 1, len(lines)) if lines[k].lstrip().startswith("[")), len(lines))
        last_key = start
        for k in range(start + 1, end):
            line = lines[k]
            body = line.rstrip("\r\n")
            stripped = body.strip()
            if not stripped or stripped.startswith("#"):
                continue
            last_key = k
            m = re.match(r"^(\s*)([A-Za-z0-9_-]+|\"[^\"]*\")(\s*=\s*)(.*)$", body)
            if not m:
                continue
            key = m.group(2).strip('"')
            if key not in todo:
                continue
            vm = _VALUE.match(m.group(4))
            old = vm.group(1).strip() if vm else ""
            try:
                tomllib.loads(f"x = {old}\n")
            except tomllib.TOMLDecodeError:
                raise TomlEditError(
                    f"{file}: line {k + 1}: {key} spans several lines or cannot be read; edit it by hand") from None
            comment = vm.group(2) if vm else ""
            lines[k] = f"{m.group(1)}{m.group(2)}{m.group(3)}{toml_value(todo.pop(key))}{comment}{line[len(body):]}"
        if todo:
            if not lines[last_key].endswith(("\n", "\r")):
                lines[last_key] += nl
            lines[last_key + 1:last_key + 1] = [f"{k} = {toml_value(v)}{nl}" for k, v in todo.items()]
        out = "".join(lines)
    try:
        tomllib.loads(out)
    except tomllib.TOMLDecodeError as exc:
        raise TomlEditError(f"{file}: the edited file would not be valid TOML ({exc})") from None
    return out
