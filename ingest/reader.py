"""Read one export file (CSV or Parquet) lazily into the canonical sample frame (SI units)."""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import polars as pl

from ingest.schema import ExportSpec

__all__ = ["IngestError", "Samples", "scan_samples", "SUFFIXES", "file_format", "probe_file", "HARD_LIMITS",
           "MAX_FILE_BYTES", "diagnose_csv", "polars_reason", "BatchPlan", "CHECK_COMBINE"]

#: One export larger than this is skipped without being read (a night of one cell at 1 kHz is ~1 GB of CSV).
MAX_FILE_BYTES = 4 * 2**30
_PROBE = 64 * 1024  # bytes read from the head and the tail of a file before trusting it

#: Readings beyond these (SI) cannot come from a GMAW power source: sensor sentinels (-9999, 1e9) or
#: saturated channels. They are set to null (then counted as dropouts) and the repair is reported.
#: Deliberately wide, so that a units mistake (kA for A, in/min for m/min) stays visible as such.
#: Common practice for GMAW, no source.
HARD_LIMITS = {"current": (-100.0, 10_000.0), "voltage": (-100.0, 1_000.0), "wire_feed": (-1.0, 10.0)}

_OFFSET = r"(Z|[+-]\d\d:?\d\d)$"  # "Z", "+01:00", "-0500" at the end of an ISO-8601 timestamp

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
    #: repairs made while reading (one line each), e.g. bytes that were not UTF-8
    notes: tuple[str, ...] = ()
    #: the same reading, batch by batch (see :class:`BatchPlan`)
    plan: BatchPlan | None = None
    #: the file read
    path: Path | None = None


def file_format(path: Path) -> str | None:
    """"csv", "parquet", or None for a file that is not an export."""
    return SUFFIXES.get(path.suffix.lower())


def _gb(n: int) -> str:
    return f"{n / 1e9:.1f} GB" if n >= 1e8 else f"{n / 1e6:.1f} MB"


def probe_file(path: Path, max_bytes: int | None = None) -> None:
    """Cheap checks before any parsing: size, sparseness, head and tail bytes.

    Reads at most 2 x 64 KiB whatever the file's size, so a 10 GB pre-allocated (sparse) file or a
    cut Parquet file fails in milliseconds instead of being read into memory.

    Raises
    ------
    IngestError
        With the one-line reason.
    """
    max_bytes = MAX_FILE_BYTES if max_bytes is None else max_bytes
    st = path.stat()
    size = st.st_size
    if size == 0:
        raise IngestError("file is empty")
    on_disk = getattr(st, "st_blocks", None)
    if on_disk is not None and size > 16 * 2**20 and on_disk * 512 < size // 2:
        raise IngestError(f"sparse file: {_gb(size)} long but only {_gb(on_disk * 512)} on disk "
                          "(pre-allocated by the logger and not yet written?); skipped without reading")
    if size > max_bytes:
        raise IngestError(f"file is {_gb(size)}, over the {_gb(max_bytes)} limit for one export; "
                          "skipped without reading (split the export)")
    with open(path, "rb") as fh:
        head = fh.read(_PROBE)
        if size > _PROBE:
            fh.seek(max(size - _PROBE, _PROBE))
            tail = fh.read(_PROBE)
        else:
            tail = head
    fmt = file_format(path)
    if fmt == "parquet":
        if head[:4] != b"PAR1":
            raise IngestError("not a Parquet file (no Parquet marker at the start)")
        if size < 12 or tail[-4:] != b"PAR1":
            raise IngestError("truncated Parquet file: the end marker is missing (copy or export cut short?)")
    elif fmt == "csv":
        if b"\0" in head or b"\0" in tail:
            where = "start" if b"\0" in head else "end"
            raise IngestError(f"binary data (NUL bytes) near the {where} of a text export "
                              "(not a CSV, or a cell still writing into a pre-allocated file?)")


def _lazy(path: Path, spec: ExportSpec, encoding: str = "utf8") -> pl.LazyFrame:
    fmt = file_format(path)
    if fmt == "parquet":
        return pl.scan_parquet(path)
    if fmt == "csv":
        # Every column as text first would be slow; let polars infer, but never guess the
        # separator: a wrong one shows up as a missing column, which is reported as such.
        return pl.scan_csv(path, separator=spec.csv_separator, infer_schema_length=10_000,
                           encoding=encoding, ignore_errors=False)
    raise IngestError(f"not a CSV or Parquet export (suffix {path.suffix!r})")


def _lines(path: Path) -> pl.DataFrame:
    """The raw lines of a text file, one a row (diagnosis only, never on the good path)."""
    return pl.read_csv(path, has_header=False, separator="\x1f", quote_char=None, new_columns=["line"],
                       schema={"line": pl.String}, encoding="utf8-lossy")


def diagnose_csv(path: Path, spec: ExportSpec) -> str | None:
    """After polars failed on a CSV: find the first offending line and say what is wrong with it.

    Returns a one-line reason, or None when nothing specific was found. Vectorised over the
    lines (polars string expressions), run only on files that already failed.
    """
    try:
        lines = _lines(path).with_row_index("n", offset=1)
    except (pl.exceptions.PolarsError, OSError):
        return None
    if lines.height == 0:
        return None
    sep = spec.csv_separator
    header = lines["line"][0] or ""
    expected = header.count(sep) + 1
    fields = lines.with_columns((pl.col("line").str.count_matches(sep, literal=True) + 1).alias("k"))
    odd = fields.filter((pl.col("n") > 1) & (pl.col("k") != expected) & (pl.col("line").str.len_bytes() > 0))
    if odd.height:
        n, k, text = odd["n"][0], odd["k"][0], odd["line"][0]
        what = "garbage or truncated line?" if k < expected else "garbage line, or a separator inside a value?"
        more = f"; {odd.height} such lines" if odd.height > 1 else ""
        return (f"line {n}: {k} field{'s' if k != 1 else ''} where {expected} were expected ({what}) "
                f"{_show(text)}{more}")
    names = header.split(sep)
    body = fields.filter(pl.col("n") > 1).with_columns(pl.col("line").str.split(sep).alias("f"))
    for ch, what in ((spec.current, "current"), (spec.voltage, "voltage"), (spec.wire_feed, "wire feed")):
        if ch.column not in names:
            continue
        j = names.index(ch.column)
        vals = body.select("n", pl.col("f").list.get(j, null_on_oob=True).str.strip_chars().alias("v"))
        bad = vals.filter(pl.col("v").is_not_null() & (pl.col("v") != "")
                          & pl.col("v").cast(pl.Float64, strict=False).is_null())
        if bad.height:
            n, v = bad["n"][0], bad["v"][0]
            if pl.Series([v]).str.contains(r"^[+-]?\d+,\d+$")[0]:
                return f'decimal comma? column {ch.column} ({what}) holds text like "{v}" (line {n})'
            return f'line {n}: column {ch.column} ({what}) holds {_show(v)}, not a number'
    if spec.time in names:
        j = names.index(spec.time)
        vals = body.select("n", pl.col("f").list.get(j, null_on_oob=True).str.strip_chars().alias("v"))
        numeric = vals["v"].cast(pl.Float64, strict=False).is_not_null()
        if not numeric.all():
            has_tz = vals["v"].str.contains(_OFFSET)
            if has_tz.any() and not has_tz.all():
                i = int((~has_tz).arg_max() if has_tz[0] else has_tz.arg_max())
                return (f'line {vals["n"][i]}: time "{vals["v"][i]}" mixes timestamps with and without a UTC offset '
                        "(mixed time zones?)")
            parsed = vals["v"].str.to_datetime(time_zone="UTC", time_unit="us", strict=False)
            bad = vals.filter(parsed.is_null() & vals["v"].is_not_null())
            if bad.height:
                return f'line {bad["n"][0]}: time {_show(bad["v"][0])} is not a timestamp or a number of seconds'
    return None


def _show(text: str | None) -> str:
    """A value quoted for a one-line reason: at most 40 characters, control characters escaped."""
    t = (text or "").strip()
    if not t:
        return "(empty)"
    cut = t[:40].encode("unicode_escape").decode("ascii") if not t[:40].isprintable() else t[:40]
    return f'"{cut}{"..." if len(t) > 40 else ""}"'


def polars_reason(exc: BaseException) -> str:
    """A short plain reason for a polars/IO error whose location could not be found."""
    text = str(exc).strip()
    low = text.lower()
    if "utf-8" in low or "utf8" in low:
        return "text is not UTF-8 (export encoding?)"
    if "parquet" in low or "thrift" in low or "out of spec" in low or "footer" in low:
        return "Parquet file is damaged (cut short or overwritten?)"
    if "more fields" in low:
        return "a line has more fields than the header (garbage line, or a separator inside a value?)"
    if "conversion from" in low and "failed in column" in low:
        col = text.split("failed in column", 1)[1].split("for", 1)[0].strip(" '\"")
        return f'column "{col}" holds values that are not numbers or timestamps'
    first = text.splitlines()[0] if text else type(exc).__name__
    return f"cannot be read ({first[:100]})"


def _schema(lf: pl.LazyFrame) -> pl.Schema:
    try:
        return lf.collect_schema()
    except pl.exceptions.NoDataError:
        raise IngestError("no data: the file has no header line") from None
    except (pl.exceptions.ComputeError, OSError, pl.exceptions.PolarsError) as exc:
        raise IngestError(polars_reason(exc)) from None


def parse_iso_utc(text: pl.Series) -> pl.Series:
    """ISO-8601 timestamps (text) to UTC instants, microseconds.

    A value with a UTC offset ("Z", "+01:00", "-0500") is converted to UTC; a file whose values
    carry none is taken as UTC. Arrow's vectorised ISO-8601 parser does the work (about ten times
    polars' format-inferring parser on a 1 kHz log); anything it refuses (other layouts, more than
    six decimals, values with and without an offset mixed) goes to polars'
    ``str.to_datetime(time_zone="UTC", strict=True)``, whose result or error is then the answer.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    arr = text.cast(pl.String).to_arrow()
    for target in (pa.timestamp("us", tz="UTC"), pa.timestamp("us")):
        try:
            got = pl.Series(text.name, pc.cast(arr, target))
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            continue
        return got if target.tz else got.dt.replace_time_zone("UTC")
    return text.str.to_datetime(time_zone="UTC", time_unit="us", strict=True)


def _time_expr(name: str, dtype: pl.DataType) -> tuple[pl.Expr, pl.Expr]:
    """(absolute time as float64 seconds or int64 microseconds, UTC timestamp or null) of one row.

    The first is ``_abs``: float seconds as logged for a numeric time column, else microseconds
    since the epoch (Int64) of the UTC timestamp. ``t`` is ``_abs`` minus the file's first value.
    """
    col = pl.col(name)
    if dtype.is_numeric():
        return col.cast(pl.Float64), pl.lit(None, dtype=pl.Datetime("us", "UTC"))
    if isinstance(dtype, pl.Datetime):
        ts = col.dt.replace_time_zone("UTC") if dtype.time_zone is None else col.dt.convert_time_zone("UTC")
    elif dtype == pl.String:
        ts = col.map_batches(parse_iso_utc, return_dtype=pl.Datetime("us", "UTC"), is_elementwise=True)
    else:
        raise IngestError(f'time column "{name}" has type {dtype}; expected seconds or ISO-8601 timestamps')
    ts = ts.cast(pl.Datetime("us", "UTC"))
    return ts.dt.epoch("us"), ts


def _t_from(abs_t: pl.Expr, numeric: bool, origin: pl.Expr) -> pl.Expr:
    """Seconds since ``origin`` (the file's first ``_abs`` value) from the ``_abs`` expression."""
    if numeric:
        return (abs_t - origin).alias("t")
    return ((abs_t - origin).cast(pl.Float64) / 1e6).alias("t")


@dataclass(frozen=True)
class BatchPlan:
    """How to turn batches of an export's rows into canonical samples and file-level checks.

    Used by :func:`ingest.onepass.aggregate_file`, which streams ``source`` (the export's own
    columns, lazily, in file order) in batches: ``origin`` (one value) is evaluated on the first
    batch, ``canonical(batch, origin)`` gives the numeric canonical columns of every batch (``t``,
    ``_abs`` the time as stored, channels, ``tip_change`` when mapped), ``text`` the label columns, ``checks`` one row of
    per-batch counts (combined by :data:`CHECK_COMBINE`; ``seam_labels`` is left to the caller).
    """

    source: pl.LazyFrame
    origin: pl.Expr
    #: ``canonical(batch, origin, *extra)``: the batch's canonical columns and ``extra``
    canonical: Callable[..., pl.DataFrame]
    #: the text columns the export has, among "seam", "part", "serial" (cast to String)
    text: dict[str, pl.Expr]
    checks: tuple[pl.Expr, ...]
    time_column: str
    #: ``rows`` and ``dup_t`` only: the channel counts then come from the columns (null counts,
    #: NaN counts, maxima), valid when every channel is numeric in the export
    light_checks: tuple[pl.Expr, ...] = ()
    #: (alias, export column, numeric?) of current, voltage, wire feed
    channels: tuple[tuple[str, str, bool], ...] = ()
    #: an aggregate of the ``_abs`` column (min per seam) to a UTC timestamp (us)
    to_ts: Callable[[pl.Expr], pl.Expr] | None = None
    #: the distinct UTC offsets a batch's text timestamps carry (None: the time is not text)
    tz_offsets: Callable[[pl.DataFrame], list[str]] | None = None



def _offsets_of(column: str) -> Callable[[pl.DataFrame], list[str]]:
    """The distinct UTC offsets (sorted) the text timestamps in ``column`` of a batch carry.

    The usual batches are answered by one string test over the rows: every value ends with the
    first value's offset, or no value has a sign where an offset's would be (no offset at all).
    Any other batch has the regex run on its distinct last-6-character endings (an offset is at
    most 6 characters), not on every row.
    """
    col = pl.col(column)
    slow = col.str.slice(-6).unique().str.extract(_OFFSET, 1).drop_nulls().unique().sort()
    signs = ["+", "-"]
    no_offset = ~(col.str.ends_with("Z") | col.str.slice(-6, 1).is_in(signs) | col.str.slice(-5, 1).is_in(signs)).any()

    def offsets(batch: pl.DataFrame) -> list[str]:
        s = batch.get_column(column)
        head = s.head(64).drop_nulls()
        first = re.search(_OFFSET, head[0][-6:]) if head.len() else None
        if first is not None and bool(s.str.ends_with(first.group(1)).all()):
            return [first.group(1)]
        if first is None and head.len() and bool(batch.select(no_offset).item()):
            return []
        return batch.select(slow).to_series().to_list()

    return offsets


#: The file-level checks and how per-batch values combine into the file's ("sum", "max", or "union"
#: of strings): ``rows``; ``<ch>_nulls`` and ``<ch>_absurd`` (readings outside HARD_LIMITS, sensor
#: sentinels or saturation) for current, voltage, wire feed; ``current_max`` (A, over plausible
#: readings: the units hint of a file without arc-on samples); ``dup_t`` repeated timestamps;
#: ``tz_offsets`` the UTC offsets text timestamps carry; ``seam_labels`` (labelled files) every
#: "serial\u241fseam" key.
CHECK_COMBINE = {"rows": "sum", "dup_t": "sum", "tz_offsets": "union", "seam_labels": "union", "current_max": "max",
                 **{f"{c}_{k}": "sum" for c in ("current", "voltage", "wire_feed") for k in ("nulls", "absurd")}}


def scan_samples(path: Path, spec: ExportSpec, encoding: str = "utf8") -> Samples:
    """Lazy canonical frame of one export file (``Samples.frame``).

    Columns: ``t`` [s], ``ts`` (UTC or null), ``current`` [A], ``voltage`` [V], ``wire_feed``
    [m/s], ``travel_speed`` [m/s] (null if not mapped), ``seam``, ``part``, ``serial`` (String,
    null if not mapped). Rows stay in file order: loggers write in time order, and a file whose
    timestamps go backwards is caught per seam downstream rather than silently re-sorted.

    ``encoding="utf8-lossy"`` reads a CSV whose bytes are not all UTF-8, replacing the bad ones
    (U+FFFD); the repair is then listed in ``Samples.notes``.

    Raises
    ------
    IngestError
        Unreadable file, or a required column missing (the message lists the columns found).
    """
    notes: list[str] = []
    if encoding != "utf8" and file_format(path) == "csv":
        notes.append("repaired: bytes that are not UTF-8 replaced (export encoding is not UTF-8?)")
    lf = _lazy(path, spec, encoding=encoding)
    try:
        schema = _schema(lf)
    except IngestError as exc:
        if file_format(path) != "csv" or "UTF-8" not in str(exc):
            raise
        # Repair: a latin-1 serial or comment must not cost the night's data. Bytes that are
        # not UTF-8 become U+FFFD; a numeric column hit by one still fails below, by name.
        lf = _lazy(path, spec, encoding="utf8-lossy")
        schema = _schema(lf)
        notes.append("repaired: bytes that are not UTF-8 replaced (export encoding is not UTF-8?)")
    names = list(schema.names())
    if not names:
        raise IngestError("file has no columns")

    def need(col: str, what: str) -> None:
        if col not in schema:
            shown = ", ".join(names[:12]) + (", ..." if len(names) > 12 else "")
            if len(names) == 1 and spec.csv_separator not in names[0]:
                for other, label in ((";", "semicolon"), ("\t", "tab"), ("|", "bar"), (",", "comma")):
                    if other != spec.csv_separator and other in names[0]:
                        raise IngestError(f"wrong delimiter? the header is one column on {spec.csv_separator!r} "
                                          f"but contains {label}s: {_show(names[0])} (set separator in cell.toml [export])")
            raise IngestError(f'column "{col}" ({what}) not found; columns are: {shown}')

    need(spec.time, "time")
    for what, ch in (("current", spec.current), ("voltage", spec.voltage), ("wire feed", spec.wire_feed)):
        need(ch.column, what)
    abs_t, ts = _time_expr(spec.time, schema[spec.time])
    numeric_time = schema[spec.time].is_numeric()

    def raw(ch, alias: str) -> pl.Expr:
        dt = schema[ch.column]
        if dt == pl.String:
            # Text where numbers were expected: an all-empty column (read as text), a decimal
            # comma, or a stray word. Find the first offender (one lazy pass, only on this path).
            c = pl.col(ch.column).str.strip_chars()
            bad = (lf.with_row_index("_i").filter(c.is_not_null() & (c != "") & c.cast(pl.Float64, strict=False).is_null())
                   .select("_i", ch.column).head(1).collect())
            if bad.height == 0:
                return c.replace("", None).cast(pl.Float64) * ch.scale
            is_csv = file_format(path) == "csv"
            v = bad[ch.column][0]
            where = f"line {bad['_i'][0] + 2}" if is_csv else f"row {bad['_i'][0] + 1}"
            if pl.Series([v.strip()]).str.contains(r"^[+-]?\d+,\d+$")[0]:
                raise IngestError(f'decimal comma? column {ch.column} ({alias.replace("_", " ")}) holds text like '
                                  f'"{v.strip()}" ({where})')
            found = diagnose_csv(path, spec) if is_csv else None
            raise IngestError(found or f'{where}: column {ch.column} ({alias.replace("_", " ")}) holds '
                              f'{_show(v)}, not a number')
        if not (dt.is_numeric() or dt == pl.Null):
            found = diagnose_csv(path, spec) if file_format(path) == "csv" else None
            raise IngestError(found or f'column "{ch.column}" ({alias}) holds {dt}, not numbers; '
                              "decimal comma or wrong separator?")
        x = pl.col(ch.column).cast(pl.Float64)
        return x * ch.scale if ch.scale != 1.0 else x  # a log already in SI: no multiply per sample

    def chan(ch, alias: str) -> pl.Expr:
        x = raw(ch, alias)
        lim = HARD_LIMITS.get(alias)
        if lim is not None:
            x = pl.when(x.is_between(*lim)).then(x)  # null stays null; NaN and out-of-range become null
        return x.alias(alias)

    exprs = [ts.alias("ts"), chan(spec.current, "current"), chan(spec.voltage, "voltage"), chan(spec.wire_feed, "wire_feed")]
    if spec.travel_speed is not None and spec.travel_speed.column in schema:
        exprs.append(chan(spec.travel_speed, "travel_speed"))
        has_travel = True
    else:
        has_travel = False
        exprs.append(pl.lit(None, dtype=pl.Float64).alias("travel_speed"))
    text: dict[str, pl.Expr] = {}
    for opt, alias in ((spec.seam, "seam"), (spec.part, "part"), (spec.serial, "serial")):
        if opt is not None and opt in schema:
            text[alias] = pl.col(opt).cast(pl.String).alias(alias)
    strings = [text.get(a, pl.lit(None, dtype=pl.String).alias(a)) for a in ("seam", "part", "serial")]
    if spec.tip_change is not None and spec.tip_change in schema:
        col = pl.col(spec.tip_change)
        marker = (col.cast(pl.String).str.to_lowercase().is_in(["1", "true", "yes", "y", "x"])
                  if schema[spec.tip_change] == pl.String else col.cast(pl.Float64).fill_nan(0) != 0)
        exprs.append(marker.fill_null(False).alias("tip_change"))
    present = {alias: opt is not None and opt in schema
               for opt, alias in ((spec.seam, "seam"), (spec.part, "part"), (spec.serial, "serial"))}
    checks = [pl.len().alias("rows")]
    for ch, alias in ((spec.current, "current"), (spec.voltage, "voltage"), (spec.wire_feed, "wire_feed")):
        x = raw(ch, alias)
        lo, hi = HARD_LIMITS[alias]
        ok = x.is_between(lo, hi)
        checks += [x.is_null().sum().alias(f"{alias}_nulls"),
                   (x.is_not_null() & ~ok & ~x.is_nan()).sum().alias(f"{alias}_absurd")]
        if alias == "current":
            checks.append(x.filter(ok).max().alias("current_max"))
    # repeated timestamps compared as logged (no second parse of the time column)
    checks.append((pl.col(spec.time) == pl.col(spec.time).shift(1)).sum().alias("dup_t"))
    tz_offsets = _offsets_of(spec.time) if schema[spec.time] == pl.String else None
    used = [spec.time, spec.current.column, spec.voltage.column, spec.wire_feed.column,
            *(c for c in (spec.seam, spec.part, spec.serial, spec.tip_change) if c is not None and c in schema)]
    if has_travel:
        used.append(spec.travel_speed.column)
    source = lf.select(list(dict.fromkeys(used)))

    tdt = schema[spec.time]
    if isinstance(tdt, pl.Datetime) and tdt.time_unit in ("ms", "us"):
        # the stored integers are UTC epoch counts whatever the zone: no conversion per row
        per_s = 1e3 if tdt.time_unit == "ms" else 1e6
        batch_abs = pl.col(spec.time).to_physical()
        stored_ints = True

        def to_ts(v: pl.Expr) -> pl.Expr:
            return (v * (1000 if tdt.time_unit == "ms" else 1)).cast(pl.Datetime("us", "UTC"))
    elif numeric_time:
        per_s, batch_abs, stored_ints = None, abs_t, False

        def to_ts(v: pl.Expr) -> pl.Expr:
            return pl.lit(None, dtype=pl.Datetime("us", "UTC"))
    else:
        per_s, batch_abs, stored_ints = 1e6, abs_t, False

        def to_ts(v: pl.Expr) -> pl.Expr:
            return v.cast(pl.Datetime("us", "UTC"))

    def canonical(raw: pl.DataFrame, origin, *extra: pl.Expr) -> pl.DataFrame:
        o = pl.lit(origin, dtype=pl.Float64 if numeric_time else pl.Int64)
        # stored integer times are read twice in one select (no copy); text is parsed once a
        # batch and t computed from the parsed column afterwards. An eager select: a lazy one
        # would compute a scaled channel once, not twice, but returns columns in morsel-sized
        # chunks, and every later step then pays more than that for the chunks.
        a = batch_abs if stored_ints else pl.col("_abs")
        # exactly the whole-file form's float: microseconds since the first sample / 1e6 (not
        # milliseconds / 1e3: polars divides by a constant through its reciprocal, so the two
        # differ in the last bit)
        us = (a - o) * 1000 if per_s == 1e3 else a - o
        t = (a - o) if per_s is None else us.cast(pl.Float64) / 1e6
        if stored_ints:
            return raw.select(batch_abs.alias("_abs"), *exprs[1:], *extra, t.alias("t"))
        return raw.select(batch_abs.alias("_abs"), *exprs[1:], *extra).with_columns(t.alias("t"))

    channels = tuple((alias, ch.column, schema[ch.column].is_numeric())
                     for ch, alias in ((spec.current, "current"), (spec.voltage, "voltage"),
                                       (spec.wire_feed, "wire_feed")))
    light = (pl.len().alias("rows"), checks[-1])
    plan = BatchPlan(source=source, origin=batch_abs.first(), canonical=canonical, text=text,
                     checks=tuple(checks), time_column=spec.time, light_checks=light, channels=channels,
                     to_ts=to_ts, tz_offsets=tz_offsets)
    # Whole-file lazy forms (traces, the window fallback, tests): t from the first value.
    whole = [_t_from(abs_t, numeric_time, abs_t.first()), *exprs[:5], *strings, *exprs[5:]]
    return Samples(frame=lf.select(whole), columns=tuple(names), has_seam=present["seam"], has_part=present["part"],
                   has_serial=present["serial"], has_travel_speed=has_travel, notes=tuple(notes),
                   plan=plan, path=path)
