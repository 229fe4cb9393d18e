"""Configuration: TOML files with unit strings, parsed once into frozen dataclasses (SI inside).

Layout of a config folder::

    config/cell.toml          export column mapping, arc segmentation, sensor uncertainties
    config/wires.toml         consumables: diameter, density, melting coefficients
    config/parts/*.toml       one file a part: nominal CTWD, minimum penetration, reference section

Every error is one line naming the file, the key, what was found and what was expected.
"""

from __future__ import annotations

import hashlib
import re
import tomllib
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ingest.schema import ArcSettings, ChannelMap, ExportSpec
from monitor.units import UnitError, scale_to_si, to_si

__all__ = [
    "ConfigError",
    "Sensors",
    "Wire",
    "SeamSpec",
    "PenetrationReference",
    "Baseline",
    "Part",
    "DriftSettings",
    "CellConfig",
    "Config",
    "load_config",
    "load_cell",
    "load_wires",
    "load_part",
]


class ConfigError(ValueError):
    """A configuration problem, already phrased as one line for the user."""


@dataclass(frozen=True)
class Sensors:
    """One-sigma relative gain uncertainty of each channel [-]."""

    current: float = 0.01
    voltage: float = 0.01
    wire_feed: float = 0.01


@dataclass(frozen=True)
class Wire:
    """A consumable. SI: diameter [m], density [kg/m³], A [kg/(s·A)], B [kg/(s·m·A²)]."""

    name: str
    diameter: float
    density: float
    melt_a: float
    melt_b: float
    melt_a_se: float = 0.0
    melt_b_se: float = 0.0
    melt_ab_corr: float = 0.0
    calibrated_on: str | None = None


@dataclass(frozen=True)
class SeamSpec:
    """What one seam position of a part should be. SI units; None where not given."""

    name: str
    nominal_ctwd: float
    min_penetration: float
    travel_speed: float | None = None
    wire_feed: float | None = None  # programmed
    voltage: float | None = None  # programmed
    ctwd_band: float = 0.003  # allowed |CTWD - nominal| before a watch [m]
    wire_feed_tolerance: float = 0.05  # relative window around programmed WFS
    voltage_tolerance: float = 0.05  # relative window around programmed voltage
    penetration_margin: float = 0.0  # watch when penetration < minimum + this margin [m]


@dataclass(frozen=True)
class PenetrationReference:
    """One measured macro section: conditions [A, V, m/s] and depth [m]."""

    current: float
    voltage: float
    travel_speed: float
    depth: float
    depth_se: float = 0.0  # standard error of depth from a calibration [m]
    exponents: tuple[float, float, float] = (4.0 / 3.0, -2.0 / 3.0, -1.0 / 3.0)


@dataclass(frozen=True)
class Baseline:
    """Baseline zeroing of a part: the first ``seams`` good seams after each tip change are taken
    to be at nominal CTWD and a current-gain correction is solved from them.

    Tip changes come from ``tip_changes`` (a CSV with a ``time`` column of ISO-8601 UTC times, or
    a ``serial`` column: the first seam of that serial follows a new tip), from a detected step
    of at least ``detect_step`` [m] back toward nominal between consecutive seams of one seam
    position, and always at the start of the scan.
    """

    seams: int = 5
    tip_changes: Path | None = None
    detect_step: float | None = None
    tip_times: tuple[datetime, ...] = ()  # UTC, sorted, from a ``time`` column
    tip_serials: tuple[str, ...] = ()  # from a ``serial`` column


@dataclass(frozen=True)
class DriftSettings:
    """Drift charts of a part ([drift] table): EWMA λ and L, CUSUM k and h in units of each
    seam's in-control σ, and how many parts form the baseline that estimates σ."""

    ewma_lambda: float = 0.10
    ewma_l: float = 2.814
    cusum_k: float = 0.5
    cusum_h: float = 5.0
    baseline_parts: int = 20


@dataclass(frozen=True)
class Part:
    name: str
    wire: str
    defaults: SeamSpec
    seams: dict[str, SeamSpec]
    reference: PenetrationReference
    path: Path
    baseline: Baseline | None = None
    drift: DriftSettings = DriftSettings()

    def seam(self, name: str) -> SeamSpec:
        """The spec of seam ``name``: its own entry, else the part's defaults under that name."""
        spec = self.seams.get(name)
        return spec if spec is not None else replace(self.defaults, name=name)


@dataclass(frozen=True)
class CellConfig:
    export: ExportSpec
    arc: ArcSettings
    sensors: Sensors
    path: Path


@dataclass(frozen=True)
class Config:
    cell: CellConfig
    wires: dict[str, Wire]
    parts: dict[str, Part]
    root: Path
    digest: str
    files: tuple[Path, ...] = field(default=())


# --------------------------------------------------------------------------------------------
# helpers


def _read_toml(path: Path) -> dict[str, Any]:
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(f"{path}: file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot be read ({exc.strerror})") from None


class _Table:
    """A TOML table being consumed: remembers which keys were used, to reject unknown ones."""

    def __init__(self, path: Path, where: str, data: Any):
        self.path = path
        self.where = where  # e.g. '[arc]' or 'seam "S1"'
        if not isinstance(data, dict):
            raise ConfigError(f"{path}: {where or 'top level'} must be a table")
        self.data = data

    def _name(self, key: str) -> str:
        return f"{self.where}: {key}" if self.where else key

    def fail(self, key: str, msg: str) -> ConfigError:
        return ConfigError(f"{self.path}: {self._name(key)} {msg}")

    def quantity(self, key: str, dimension: str, default: float | None = None, required: bool = False,
                 positive: bool = True) -> float | None:
        if key not in self.data:
            if required:
                raise ConfigError(f"{self.path}: {self._name(key)} is missing (a {dimension}, e.g. see README)")
            return default
        raw = self.data[key]
        try:
            value = to_si(raw, dimension)
        except UnitError as exc:
            raise ConfigError(f"{self.path}: {self._name(key)} {exc}") from None
        if positive and not value > 0:
            raise self.fail(key, f'"{raw}" must be greater than zero')
        return value

    def fraction(self, key: str, default: float) -> float:
        """A relative value: "5 %" or 0.05."""
        if key not in self.data:
            return default
        raw = self.data[key]
        try:
            value = to_si(raw, "dimensionless")
        except UnitError:
            raise self.fail(key, f'"{raw}" is not a fraction (use e.g. "5 %" or 0.05)') from None
        if not 0 <= value < 1:
            raise self.fail(key, f'"{raw}" must be between 0 and 100 %')
        return value

    def string(self, key: str, required: bool = False, default: str | None = None) -> str | None:
        if key not in self.data:
            if required:
                raise ConfigError(f"{self.path}: {self._name(key)} is missing (a name in quotes)")
            return default
        raw = self.data[key]
        if not isinstance(raw, str) or not raw.strip():
            raise self.fail(key, f"{raw!r} must be a non-empty string")
        return raw

    def number(self, key: str, default: float, lo: float, hi: float) -> float:
        if key not in self.data:
            return default
        raw = self.data[key]
        if isinstance(raw, bool) or not isinstance(raw, (int, float)) or not lo <= raw <= hi:
            raise self.fail(key, f"{raw!r} must be a number from {lo} to {hi}")
        return float(raw)

    def check_keys(self, allowed: set[str]) -> None:
        unknown = sorted(set(self.data) - allowed)
        if unknown:
            raise ConfigError(
                f"{self.path}: {self._name(unknown[0])} is not a known key; expected one of: {', '.join(sorted(allowed))}"
            )


# --------------------------------------------------------------------------------------------
# cell.toml


def _channel(table: _Table, key: str, dimension: str, required: bool) -> ChannelMap | None:
    if key not in table.data:
        if required:
            raise ConfigError(f'{table.path}: [export] {key} is missing (e.g. {key} = {{ column = "...", unit = "..." }})')
        return None
    raw = table.data[key]
    if not isinstance(raw, dict):
        raise table.fail(key, f'must be a table like {{ column = "{key}", unit = "..." }}')
    sub = _Table(table.path, f"[export] {key}", raw)
    sub.check_keys({"column", "unit"})
    column = sub.string("column", required=True)
    unit = sub.string("unit", required=True)
    try:
        scale = scale_to_si(unit, dimension)
    except UnitError:
        raise sub.fail("unit", f'"{unit}" is not a unit of {dimension}') from None
    return ChannelMap(column=column, scale=scale, unit=unit)


def load_cell(path: Path) -> CellConfig:
    data = _read_toml(path)
    top = _Table(path, "", data)
    top.check_keys({"export", "arc", "sensors"})
    if "export" not in data:
        raise ConfigError(f"{path}: [export] table is missing")
    ex = _Table(path, "[export]", data["export"])
    ex.check_keys({"time", "seam", "part", "serial", "current", "voltage", "wire_feed", "travel_speed", "separator",
                   "tip_change"})
    sep = ex.string("separator", default=",")
    if len(sep) != 1:
        raise ex.fail("separator", f"{sep!r} must be one character")
    export = ExportSpec(
        time=ex.string("time", required=True),
        seam=ex.string("seam"),
        part=ex.string("part"),
        serial=ex.string("serial"),
        current=_channel(ex, "current", "current", True),
        voltage=_channel(ex, "voltage", "voltage", True),
        wire_feed=_channel(ex, "wire_feed", "speed", True),
        travel_speed=_channel(ex, "travel_speed", "speed", False),
        csv_separator=sep,
        tip_change=ex.string("tip_change"),
    )
    arc_t = _Table(path, "[arc]", data.get("arc", {}))
    arc_t.check_keys({"min_current", "trim_start", "trim_end", "min_duration", "max_gap", "max_dropout"})
    d = ArcSettings()
    arc = ArcSettings(
        min_current=arc_t.quantity("min_current", "current", d.min_current),
        trim_start=arc_t.quantity("trim_start", "time", d.trim_start, positive=False),
        trim_end=arc_t.quantity("trim_end", "time", d.trim_end, positive=False),
        min_duration=arc_t.quantity("min_duration", "time", d.min_duration),
        max_gap=arc_t.quantity("max_gap", "time", d.max_gap),
        max_dropout_fraction=arc_t.fraction("max_dropout", d.max_dropout_fraction),
    )
    if arc.trim_start < 0 or arc.trim_end < 0:
        raise ConfigError(f"{path}: [arc] trim_start/trim_end must not be negative")
    s_t = _Table(path, "[sensors]", data.get("sensors", {}))
    s_t.check_keys({"current", "voltage", "wire_feed"})
    sensors = Sensors(
        current=s_t.number("current", 0.01, 0.0, 0.5),
        voltage=s_t.number("voltage", 0.01, 0.0, 0.5),
        wire_feed=s_t.number("wire_feed", 0.01, 0.0, 0.5),
    )
    return CellConfig(export=export, arc=arc, sensors=sensors, path=path)


# --------------------------------------------------------------------------------------------
# wires.toml

_WIRE_KEYS = {"diameter", "density", "melt_a", "melt_b", "melt_a_se", "melt_b_se", "melt_ab_corr",
              "calibrated_on", "reference_seams", "note"}


def load_wires(path: Path) -> dict[str, Wire]:
    data = _read_toml(path)
    top = _Table(path, "", data)
    top.check_keys({"wire"})
    wires_t = data.get("wire", {})
    if not isinstance(wires_t, dict) or not wires_t:
        raise ConfigError(f'{path}: no [wire."NAME"] table found')
    wires: dict[str, Wire] = {}
    for name, raw in wires_t.items():
        t = _Table(path, f'[wire."{name}"]', raw)
        t.check_keys(_WIRE_KEYS)
        cal = t.data.get("calibrated_on")
        wires[name] = Wire(
            name=name,
            diameter=t.quantity("diameter", "length", required=True),
            density=t.quantity("density", "density", required=True),
            melt_a=t.quantity("melt_a", "melt_a", required=True),
            melt_b=t.quantity("melt_b", "melt_b", required=True),
            melt_a_se=t.quantity("melt_a_se", "melt_a", 0.0, positive=False),
            melt_b_se=t.quantity("melt_b_se", "melt_b", 0.0, positive=False),
            melt_ab_corr=t.number("melt_ab_corr", 0.0, -1.0, 1.0),
            calibrated_on=str(cal) if cal is not None else None,
        )
        w = wires[name]
        if not 0.3e-3 <= w.diameter <= 3.0e-3:
            raise t.fail("diameter", f"{w.diameter * 1e3:g} mm is outside 0.3-3 mm; units?")
        if not 1000 <= w.density <= 25000:
            raise t.fail("density", f"{w.density:g} kg/m**3 is not a metal's density; units?")
    return wires


# --------------------------------------------------------------------------------------------
# parts/*.toml

_SEAM_KEYS = {"nominal_ctwd", "min_penetration", "travel_speed", "wire_feed", "voltage", "ctwd_band",
              "wire_feed_tolerance", "voltage_tolerance", "penetration_margin"}


def _seam_spec(t: _Table, name: str, base: SeamSpec | None) -> SeamSpec:
    b = base
    spec = SeamSpec(
        name=name,
        nominal_ctwd=t.quantity("nominal_ctwd", "length", b.nominal_ctwd if b else None, required=b is None),
        min_penetration=t.quantity("min_penetration", "length", b.min_penetration if b else None, required=b is None),
        travel_speed=t.quantity("travel_speed", "speed", b.travel_speed if b else None),
        wire_feed=t.quantity("wire_feed", "speed", b.wire_feed if b else None),
        voltage=t.quantity("voltage", "voltage", b.voltage if b else None),
        ctwd_band=t.quantity("ctwd_band", "length", b.ctwd_band if b else 0.003),
        wire_feed_tolerance=t.fraction("wire_feed_tolerance", b.wire_feed_tolerance if b else 0.05),
        voltage_tolerance=t.fraction("voltage_tolerance", b.voltage_tolerance if b else 0.05),
        penetration_margin=t.quantity("penetration_margin", "length", b.penetration_margin if b else 0.0,
                                      positive=False),
    )
    if not 2e-3 <= spec.nominal_ctwd <= 60e-3:
        raise t.fail("nominal_ctwd", f"{spec.nominal_ctwd * 1e3:g} mm is outside 2-60 mm; units?")
    if not spec.min_penetration < 50e-3:
        raise t.fail("min_penetration", f"{spec.min_penetration * 1e3:g} mm is implausible; units?")
    if not 0.0 <= spec.penetration_margin < 5e-3:
        raise t.fail("penetration_margin", f"{spec.penetration_margin * 1e3:g} mm must be 0 to 5 mm; units?")
    return spec


def load_part(path: Path, wires: dict[str, Wire]) -> Part:
    data = _read_toml(path)
    t = _Table(path, "", data)
    t.check_keys({"part", "wire", "penetration_reference", "seam", "note", "baseline", "drift"} | _SEAM_KEYS)
    name = t.string("part", required=True)
    wire = t.string("wire", required=True)
    if wire not in wires:
        raise t.fail("wire", f'"{wire}" is not in wires.toml; known wires: {", ".join(sorted(wires))}')
    defaults = _seam_spec(t, "*", None)
    if "penetration_reference" not in data:
        raise ConfigError(f"{path}: [penetration_reference] table is missing (one measured macro section)")
    r = _Table(path, "[penetration_reference]", data["penetration_reference"])
    r.check_keys({"current", "voltage", "travel_speed", "depth", "depth_se", "exponents", "calibrated_on", "sections"})
    exps = r.data.get("exponents", [4.0 / 3.0, -2.0 / 3.0, -1.0 / 3.0])
    if (not isinstance(exps, list) or len(exps) != 3
            or not all(isinstance(e, (int, float)) and not isinstance(e, bool) for e in exps)):
        raise r.fail("exponents", "must be a list of three numbers [current, voltage, travel speed]")
    ref = PenetrationReference(
        current=r.quantity("current", "current", required=True),
        voltage=r.quantity("voltage", "voltage", required=True),
        travel_speed=r.quantity("travel_speed", "speed", required=True),
        depth=r.quantity("depth", "length", required=True),
        depth_se=r.quantity("depth_se", "length", 0.0, positive=False),
        exponents=(float(exps[0]), float(exps[1]), float(exps[2])),
    )
    seams: dict[str, SeamSpec] = {}
    raw_seams = data.get("seam", [])
    if not isinstance(raw_seams, list):
        raise t.fail("seam", "must be an array of tables ([[seam]] entries)")
    for i, raw in enumerate(raw_seams):
        st = _Table(path, f"[[seam]] #{i + 1}", raw)
        st.check_keys({"name"} | _SEAM_KEYS)
        sname = st.string("name", required=True)
        st.where = f'seam "{sname}"'
        if sname in seams:
            raise st.fail("name", f'"{sname}" is named twice; each seam once')
        seams[sname] = _seam_spec(st, sname, defaults)
    baseline = _baseline(path, data["baseline"]) if "baseline" in data else None
    return Part(name=name, wire=wire, defaults=defaults, seams=seams, reference=ref, path=path, baseline=baseline,
                drift=_drift(path, data.get("drift", {})))


_BASELINE_KEYS = {"seams", "tip_changes", "detect_step", "note"}


def _baseline(path: Path, raw: Any) -> Baseline:
    """The [baseline] table of a part file."""
    b = _Table(path, "[baseline]", raw)
    b.check_keys(_BASELINE_KEYS)
    n = b.data.get("seams", 5)
    if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= 1000:
        raise b.fail("seams", f"{n!r} must be a whole number of seams from 1 to 1000")
    tips = b.string("tip_changes")
    tip_path = None
    if tips is not None:
        tip_path = Path(tips) if Path(tips).is_absolute() else path.parent / tips
        if not tip_path.is_file():
            raise b.fail("tip_changes", f'"{tips}" not found (looked for {tip_path}); a CSV with a time or serial column')
    step = b.quantity("detect_step", "length")
    if step is not None and not 0.5e-3 <= step <= 30e-3:
        raise b.fail("detect_step", f"{step * 1e3:g} mm is outside 0.5-30 mm; units?")
    times: tuple[datetime, ...] = ()
    serials: tuple[str, ...] = ()
    if tip_path is not None:
        times, serials = _read_tip_changes(tip_path)
    return Baseline(seams=n, tip_changes=tip_path, detect_step=step, tip_times=times, tip_serials=serials)


def _read_tip_changes(path: Path) -> tuple[tuple[datetime, ...], tuple[str, ...]]:
    """Tip-change times (``time`` column, ISO-8601; UTC when no offset) or serials (``serial`` column)."""
    import csv

    try:
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
            cols = [c.strip() for c in (rows[0].keys() if rows else [])]
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise ConfigError(f"{path}: cannot be read as CSV ({exc})") from None
    rows = [{k.strip(): (v or "").strip() for k, v in r.items() if k is not None} for r in rows]
    if "time" in cols:
        out = []
        for k, r in enumerate(rows, start=2):
            if not r["time"]:
                continue
            try:
                t = datetime.fromisoformat(r["time"].replace("Z", "+00:00"))
            except ValueError:
                raise ConfigError(f'{path}: line {k}: time "{r["time"]}" is not an ISO-8601 time') from None
            out.append(t.replace(tzinfo=UTC) if t.tzinfo is None else t.astimezone(UTC))
        return tuple(sorted(out)), ()
    if "serial" in cols:
        return (), tuple(r["serial"] for r in rows if r["serial"])
    raise ConfigError(f'{path}: no "time" or "serial" column; columns are: {", ".join(cols) or "none"}')


def _drift(path: Path, raw: Any) -> DriftSettings:
    d = _Table(path, "[drift]", raw)
    d.check_keys({"ewma_lambda", "ewma_l", "cusum_k", "cusum_h", "baseline_parts"})
    base = DriftSettings()
    lam = d.number("ewma_lambda", base.ewma_lambda, 0.0, 1.0)
    if lam <= 0:
        raise d.fail("ewma_lambda", f"{lam!r} must be greater than 0 (and at most 1)")
    n = d.number("baseline_parts", base.baseline_parts, 5, 100000)
    if n != int(n):
        raise d.fail("baseline_parts", f"{d.data['baseline_parts']!r} must be a whole number of parts")
    ewma_l = d.number("ewma_l", base.ewma_l, 0.5, 10.0)
    cusum_k = d.number("cusum_k", base.cusum_k, 0.0, 5.0)
    cusum_h = d.number("cusum_h", base.cusum_h, 0.5, 50.0)
    return DriftSettings(ewma_lambda=lam, ewma_l=ewma_l, cusum_k=cusum_k, cusum_h=cusum_h, baseline_parts=int(n))


_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


def safe_name(name: str) -> str:
    """A name fit for a file or partition: no separators, no dots-only names."""
    s = _SAFE.sub("_", name).strip("._") or "_"
    return s[:120]


def load_config(root: Path) -> Config:
    """Read and check a whole config folder before any log is read."""
    root = Path(root)
    if not root.is_dir():
        raise ConfigError(f"{root}: config folder not found")
    cell_path = root / "cell.toml"
    wires_path = root / "wires.toml"
    cell = load_cell(cell_path)
    wires = load_wires(wires_path)
    parts: dict[str, Part] = {}
    part_files = sorted((root / "parts").glob("*.toml")) if (root / "parts").is_dir() else []
    for p in part_files:
        part = load_part(p, wires)
        if part.name in parts:
            raise ConfigError(f'{p}: part "{part.name}" is also defined in {parts[part.name].path}')
        parts[part.name] = part
    files = (cell_path, wires_path, *part_files)
    h = hashlib.sha256()
    for f in files:
        h.update(str(f.relative_to(root)).encode())
        h.update(f.read_bytes())
    return Config(cell=cell, wires=wires, parts=parts, root=root, digest=h.hexdigest()[:16], files=files)
