"""Read one export file (CSV or Parquet) lazily into the canonical sample frame (SI units)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import polars as pl

from ingest.schema import ExportSpec

__all__ = ["IngestError", "Samples", "scan_samples", "SUFFIXES", "file_format"]

SUFFIXES = {".csv": "csv", ".txt": "csv", ".parquet": "parquet", ".pq": "parquet"}


class IngestError(ValueError):
    """A file that cannot be read as a cell export; the message is the one-line reason."""


@dataclass(frozen=True)
class Samples:
    """A lazy canonical frame and which optional columns the export really had."""

    frame: pl.LazyFrame
    columns: tuple[str, ...]  # the export's own column names
    has_seam: bool
    has_part: bool
    has_serial: bool
    has_travel_speed: bool


def file_format(path: Path) -> str | None:
    """"csv", "parquet", or None for a file that is not an export."""
    return SUFFIXES.get(path.suffix.lower())


def _lazy(path: Path, spec: ExportSpec) -> pl.LazyFrame:
    fmt = file_format(path)
    if fmt == "parquet":
        return pl.scan_parquet(path)
    if fmt == "csv":
        # Every column as text first would be slow; let polars infer, but never guess the
        # separator: a wrong one shows up as a missing column, which is reported as such.
        return pl.scan_csv(path, separator=spec.csv_separator, infer_schema_length=10_000,
                           encoding="utf8", ignore_errors=False)
    raise IngestError(f"not a CSV or Parquet export (suffix {path.suffix!r})")


def _schema(lf: pl.LazyFrame) -> pl.Schema:
    try:
        return lf.collect_schema()
    except pl.exceptions.NoDataError:
        raise IngestError("file is empty") from None
    except (pl.exceptions.ComputeError, OSError, pl.exceptions.PolarsError) as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise IngestError(f"cannot be read: {msg[:200]}") from None


def _time_expr(name: str, dtype: pl.DataType) -> tuple[pl.Expr, pl.Expr]:
    """(t seconds since first sample, absolute UTC timestamp or null)."""
    col = pl.col(name)
    if dtype.is_numeric():
        t = col.cast(pl.Float64)
        return (t - t.first()).alias("t"), pl.lit(None, dtype=pl.Datetime("us", "UTC")).alias("ts")
    if isinstance(dtype, pl.Datetime):
        ts = col.dt.replace_time_zone("UTC") if dtype.time_zone is None else col.dt.convert_time_zone("UTC")
    elif dtype == pl.String:
        ts = col.str.to_datetime(time_zone="UTC", time_unit="us", strict=True)
    else:
        raise IngestError(f'time column "{name}" has type {dtype}; expected seconds or ISO-8601 timestamps')
    ts = ts.cast(pl.Datetime("us", "UTC"))
    # t is derived from the parsed "ts" column (see scan_samples), so text is parsed once
    tsc = pl.col("ts")
    t = (tsc - tsc.first()).dt.total_microseconds().cast(pl.Float64) / 1e6
    return t.alias("t"), ts.alias("ts")


def scan_samples(path: Path, spec: ExportSpec) -> Samples:
    """Lazy canonical frame of one export file (``Samples.frame``).

    Columns: ``t`` [s], ``ts`` (UTC or null), ``current`` [A], ``voltage`` [V], ``wire_feed``
    [m/s], ``travel_speed`` [m/s] (null if not mapped), ``seam``, ``part``, ``serial`` (String,
    null if not mapped). Rows stay in file order: loggers write in time order, and a file whose
    timestamps go backwards is caught per seam downstream rather than silently re-sorted.

    Raises
    ------
    IngestError
        Unreadable file, or a required column missing (the message lists the columns found).
    """
    lf = _lazy(path, spec)
    schema = _schema(lf)
    names = list(schema.names())
    if not names:
        raise IngestError("file has no columns")

    def need(col: str, what: str) -> None:
        if col not in schema:
            shown = ", ".join(names[:12]) + (", ..." if len(names) > 12 else "")
            raise IngestError(f'column "{col}" ({what}) not found; columns are: {shown}')

    need(spec.time, "time")
    for what, ch in (("current", spec.current), ("voltage", spec.voltage), ("wire feed", spec.wire_feed)):
        need(ch.column, what)
    t, ts = _time_expr(spec.time, schema[spec.time])

    def chan(ch, alias: str) -> pl.Expr:
        dt = schema[ch.column]
        if not (dt.is_numeric() or dt == pl.Null):
            raise IngestError(f'column "{ch.column}" ({alias}) holds {dt}, not numbers; decimal comma or wrong separator?')
        return (pl.col(ch.column).cast(pl.Float64) * ch.scale).alias(alias)

    exprs = [t, ts, chan(spec.current, "current"), chan(spec.voltage, "voltage"), chan(spec.wire_feed, "wire_feed")]
    if spec.travel_speed is not None and spec.travel_speed.column in schema:
        exprs.append(chan(spec.travel_speed, "travel_speed"))
        has_travel = True
    else:
        has_travel = False
        exprs.append(pl.lit(None, dtype=pl.Float64).alias("travel_speed"))
    for opt, alias in ((spec.seam, "seam"), (spec.part, "part"), (spec.serial, "serial")):
        if opt is not None and opt in schema:
            exprs.append(pl.col(opt).cast(pl.String).alias(alias))
        else:
            exprs.append(pl.lit(None, dtype=pl.String).alias(alias))
    present = {alias: opt is not None and opt in schema
               for opt, alias in ((spec.seam, "seam"), (spec.part, "part"), (spec.serial, "serial"))}
    if schema[spec.time].is_numeric():
        frame = lf.select(exprs)
    else:  # t from the parsed ts column
        frame = lf.select(exprs[1:]).with_columns(exprs[0]).select("t", *[e.meta.output_name() for e in exprs[1:]])
    return Samples(frame=frame, columns=tuple(names), has_seam=present["seam"], has_part=present["part"],
                   has_serial=present["serial"], has_travel_speed=has_travel)
