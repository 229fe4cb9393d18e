"""Unit strings at the edges: parse "15 mm", "0.017 lb/h/A" with pint, hand SI floats inward."""

from __future__ import annotations

import contextlib
import json
import os
import re
import sys
from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pint


def _import_pint():
    # pint imports dask at start-up when dask is installed (for dask arrays of quantities, which
    # this program never makes); with the cluster extra that is 0.25 s on every `ctwd` command.
    # Hide dask from pint's import only; `import dask` later works as usual.
    hide = "dask" not in sys.modules
    if hide:
        sys.modules["dask"] = None  # type: ignore[assignment]  # find_spec("dask") -> None
    try:
        import pint as _pint
    finally:
        if hide:
            del sys.modules["dask"]
    return _pint

__all__ = ["UnitError", "registry", "to_si", "si_unit_of", "DIMENSIONS"]


_NUMBER_FIRST = re.compile(r"^\s*[-+]?(\d|\.\d)")


class UnitError(ValueError):
    """A unit string that cannot be parsed or has the wrong dimension."""


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """The one pint registry of the program, created (and pint imported) on first use.

    Parsing pint's unit definitions costs about 0.4 s; pint's own on-disk cache of the parsed
    definitions (``cache_folder=":auto:"``, the user's cache directory) brings a start to ~0.05 s.
    Without a writable cache directory the registry is built the slow way.
    """
    pint = _import_pint()
    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except (OSError, ImportError, ValueError, TypeError, AttributeError):
        return pint.UnitRegistry()


def _memo_path() -> Path | None:
    """Where pint's answers for this pint version are remembered (the user's cache directory)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        ver = version("pint")
    except PackageNotFoundError:
        return None
    base = os.environ.get("XDG_CACHE_HOME") or (Path.home() / ".cache")
    return Path(base) / "ctwd-monitor" / f"units-pint-{ver}.json"


@lru_cache(maxsize=1)
def _memo() -> dict[str, float]:
    path = _memo_path()
    try:
        got = json.loads(path.read_text(encoding="utf-8")) if path else {}
    except (OSError, ValueError):
        return {}
    return {k: float(v) for k, v in got.items() if isinstance(v, (int, float))} if isinstance(got, dict) else {}


_MEMO_MAX = 1000  # unit strings remembered; a config has a few dozen


def _remember(key: str, value: float) -> None:
    memo = _memo()
    if len(memo) >= _MEMO_MAX:
        return
    memo[key] = value
    path = _memo_path()
    if path is None:
        return
    tmp = path.with_name(f"{path.name}.{os.getpid()}.tmp")
    try:  # best effort: a read-only home only costs the next start pint's import
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp.write_text(json.dumps(memo, sort_keys=True), encoding="utf-8")
        os.replace(tmp, path)  # atomic: parallel workers never see half a file
    except OSError:
        with contextlib.suppress(OSError):
            tmp.unlink(missing_ok=True)


#: Named dimensions the config uses, with the SI unit each is converted to.
DIMENSIONS: dict[str, str] = {
    "length": "m",
    "current": "A",
    "voltage": "V",
    "speed": "m/s",
    "time": "s",
    "density": "kg/m**3",
    "melt_a": "kg/s/A",
    "melt_b": "kg/s/m/A**2",
    "mass_rate": "kg/s",
    "dimensionless": "",
}

_EXAMPLES: dict[str, str] = {
    "length": '"15 mm" or "0.6 in"',
    "current": '"220 A"',
    "voltage": '"24 V"',
    "speed": '"8 mm/s", "9 m/min" or "20 in/min"',
    "time": '"0.5 s"',
    "density": '"7.85 g/cm**3"',
    "melt_a": '"0.017 lb/h/A" or "7.7e-3 kg/h/A"',
    "melt_b": '"0.00014 lb/h/in/A**2" or "3e-6 kg/h/mm/A**2"',
    "mass_rate": '"5 kg/h"',
    "dimensionless": '"0.01"',
}


def si_unit_of(dimension: str) -> str:
    """The SI unit string a named dimension is converted to."""
    return DIMENSIONS[dimension]


def to_si(text: object, dimension: str) -> float:
    """Parse a quantity string and return its magnitude in the SI unit of ``dimension``.

    Parameters
    ----------
    text : str or number
        A quantity with its unit, e.g. ``"15 mm"``. A bare number is accepted only for
        ``dimension="dimensionless"``.
    dimension : str
        One of :data:`DIMENSIONS`.

    Returns
    -------
    float
        The magnitude in SI units.

    Raises
    ------
    UnitError
        With a message saying what was found and what was expected (no traceback material).
    """
    target = DIMENSIONS[dimension]
    example = _EXAMPLES[dimension]
    if isinstance(text, bool):
        raise UnitError(f"{text!r} is not a {dimension} (use e.g. {example})")
    if isinstance(text, (int, float)):
        if dimension == "dimensionless":
            return float(text)
        raise UnitError(f"{text!r} has no unit; expected a {dimension} (use e.g. {example})")
    if not isinstance(text, str):
        raise UnitError(f"{text!r} is not a {dimension} (use e.g. {example})")
    if not _NUMBER_FIRST.match(text):
        raise UnitError(f'"{text}" is not a {dimension}: a number then a unit is expected (e.g. {example})')
    if "," in text:
        raise UnitError(f'"{text}" is not a {dimension}: use a decimal point, not a comma (e.g. {example})')
    # pint's answer for this string, remembered from an earlier run: importing pint and building
    # its registry is most of a `ctwd` command's start-up; only successful conversions are kept
    key = f"{target or '1'}\x1f{text.strip()}"  # the SI unit converted to, then the string
    known = _memo().get(key)
    if known is not None:
        return known
    value = _pint_to_si(text, dimension, target, example)
    _remember(key, value)
    return value


def _pint_to_si(text: str, dimension: str, target: str, example: str) -> float:
    pint = _import_pint()
    ureg = registry()
    try:
        q = ureg.Quantity(text.strip())
    except Exception:
        raise UnitError(f'"{text}" is not a {dimension} (use e.g. {example})') from None
    if not isinstance(q, pint.Quantity):  # a bare number string
        if dimension == "dimensionless":
            return float(q)
        raise UnitError(f'"{text}" has no unit; expected a {dimension} (use e.g. {example})')
    try:
        value = q.to(target).magnitude if target else q.to("dimensionless").magnitude
    except Exception:
        raise UnitError(f'"{text}" is not a {dimension} (use e.g. {example})') from None
    value = float(value)
    if value != value or value in (float("inf"), float("-inf")):
        raise UnitError(f'"{text}" is not a finite {dimension}')
    return value


def scale_to_si(unit: str, dimension: str) -> float:
    """Factor that converts values expressed in ``unit`` to the SI unit of ``dimension``.

    Used for log columns: ``current_ka * scale_to_si("kA", "current") -> A``. Offset units
    (°C) are not accepted; no log channel here needs them.
    """
    return to_si(f"1 {unit}", dimension)
