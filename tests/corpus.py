"""Generator of the bad-input corpus: every kind of broken export a cell can leave behind, next to good ones.

    python tests/corpus.py /tmp/corpus      # writes the corpus there and prints the cases

Each case is a small file (a few kB; the sparse one is 10 GB long but takes no disk space) built
from the forward-model cell simulator, then broken in one way. ``CASES`` states, per case, the
decided outcome and a fragment the one-line reason (or note) must contain:

- ``skipped``: the file is listed in files.csv with ``status=skipped`` and the reason;
- ``invalid``: the file is read, and at least one of its seams is ``invalid`` with the reason;
- ``repaired``: the file is read, its seams are judged, and files.csv's ``note`` reports the repair;
- ``noted``: the file is read and files.csv's ``note`` says what was seen (nothing was changed).

The scenario is invented (a tow-bracket cell, part TB7-tow-bracket of the demo config).
"""

from __future__ import annotations

import os
import sys
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import polars as pl

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from monitor.config import Config, load_config  # noqa: E402
from monitor.simulate import SeamPlan, simulate_log  # noqa: E402

__all__ = ["Case", "CASES", "GOOD", "build_corpus", "good_frame", "CONFIG_DIR", "to_export"]

CONFIG_DIR = ROOT / "config"
PART = "TB7-tow-bracket"
RATE = 100.0  # samples/s: small files, still 100+ samples a seam
START = datetime(2026, 11, 30, 2, 0, tzinfo=UTC)


@dataclass(frozen=True)
class Case:
    name: str  # file name in the corpus
    kind: str  # what is wrong, in words (the README table's row)
    outcome: str  # skipped / invalid / repaired / noted / read
    expect: str  # fragment of the reason or note


CASES: tuple[Case, ...] = (
    Case("empty.csv", "empty file", "skipped", "file is empty"),
    Case("header_only.csv", "header only", "skipped", "header only"),
    Case("truncated.parquet", "truncated Parquet", "skipped", "truncated Parquet"),
    Case("not_parquet.parquet", "garbage bytes named .parquet", "skipped", "not a Parquet file"),
    Case("ragged_line.csv", "garbage line in the middle of a CSV", "skipped", "1 field where 8 were expected"),
    Case("long_line.csv", "line with extra fields", "skipped", "11 fields where 8 were expected"),
    Case("wrong_delimiter.csv", "semicolon delimiter, config says comma", "skipped", "wrong delimiter?"),
    Case("decimal_comma.csv", "decimal comma in a numeric column", "skipped", 'decimal comma? column voltage_v'),
    Case("text_in_numbers.csv", "a word in a numeric column", "skipped", 'column current_a (current) holds "ERR"'),
    Case("latin1.csv", "non-UTF-8 bytes (latin-1 serial)", "repaired", "not UTF-8 replaced"),
    Case("binary_nul.csv", "binary (NUL bytes) in a text export", "skipped", "NUL bytes"),
    Case("missing_column.csv", "required column missing", "skipped", 'column "wfs_m_min" (wire feed) not found'),
    Case("all_null_voltage.csv", "mapped column present but all empty", "skipped", "voltage_v (voltage) is empty on every row"),
    Case("current_in_kA.csv", "current logged in kA, config says A", "skipped", "kA logged but config says A? (units?)"),
    Case("wfs_in_in_min.csv", "WFS logged in in/min, config says m/min", "invalid",
         "in/min logged but config says m/min? (units?)"),
    Case("sentinel_values.csv", "absurd values (-9999 sentinels)", "repaired", "impossible current readings"),
    Case("negative_voltage.csv", "negative voltage burst in a seam", "invalid", "voltage channel dropped out"),
    Case("nan_burst.csv", "NaN burst mid-seam", "invalid", "voltage channel dropped out"),
    Case("logging_gap.csv", "sensor dropout (rows missing) mid-seam", "invalid", "logging gap"),
    Case("duplicate_timestamps.csv", "duplicated timestamps", "noted", "repeated timestamps (kept)"),
    Case("backwards_time.csv", "non-monotonic timestamps", "invalid", "timestamps go backwards"),
    Case("mixed_offsets.csv", "timestamps with mixed UTC offsets", "repaired", "mixed UTC offsets"),
    Case("naive_and_offset.csv", "timestamps with and without offset", "skipped", "with and without a UTC offset"),
    Case("no_arc_seam.csv", "a seam with no arc-on samples", "noted", "no arc-on samples"),
    Case("short_seam.csv", "a seam shorter than the trims", "invalid", "shorter than the trims"),
    Case("sparse_10gb.csv", "10 GB sparse file", "skipped", "sparse file"),
    Case("loop_a.csv", "symbolic link loop (file)", "skipped", "symbolic link loop"),
)

#: Good files in the same folder: read, every seam judged, results kept.
GOOD = ("good_1.csv", "good_2.parquet")


def _cfg() -> Config:
    return load_config(CONFIG_DIR)


def good_frame(rng: np.random.Generator, serial: str, durations=(2.5, 3.0, 2.0), cfg: Config | None = None,
               start: datetime = START) -> pl.DataFrame:
    """A short, healthy TB7 log in the export's own columns (cell.toml mapping, logged units)."""
    cfg = cfg or _cfg()
    part = cfg.parts[PART]
    w = cfg.wires[part.wire]
    plans = []
    for k, dur in enumerate(durations):
        spec = part.seam(f"S{k + 1}")
        plans.append(SeamPlan(f"S{k + 1}", spec.nominal_ctwd, spec.wire_feed, spec.voltage, spec.travel_speed, dur))
    df = simulate_log(plans, w.melt_a, w.melt_b, w.diameter, w.density, RATE, rng, idle=1.0)
    return to_export(df, serial, start)


def to_export(df: pl.DataFrame, serial: str, start: datetime = START) -> pl.DataFrame:
    """Simulator frame (SI) -> export columns: ISO time, part, serial, seam, A, V, m/min, mm/s."""
    ts = pl.lit(start) + pl.duration(microseconds=(pl.col("t") * 1e6).round(0).cast(pl.Int64))
    return df.select(
        ts.dt.strftime("%Y-%m-%dT%H:%M:%S%.3f+00:00").alias("time"),
        pl.lit(PART).alias("part"),
        pl.lit(serial).alias("serial"),
        "seam",
        pl.col("current").round(1).alias("current_a"),
        pl.col("voltage").round(2).alias("voltage_v"),
        (pl.col("wire_feed") * 60).round(3).alias("wfs_m_min"),
        (pl.col("travel_speed") * 1e3).round(2).alias("travel_mm_s"),
    )


def _mid_seam(df: pl.DataFrame, seam: str = "S2", start: float = 0.6, length: float = 0.5) -> pl.Expr:
    """Rows ``start``..``start+length`` seconds into a seam (by sample index at RATE)."""
    idx = pl.int_range(pl.len()).over("seam")
    a, b = int(start * RATE), int((start + length) * RATE)
    return (pl.col("seam") == seam) & (idx >= a) & (idx < b)


def build_corpus(folder: Path, seed: int = 7) -> Path:
    """Write every case of ``CASES`` and the ``GOOD`` files into ``folder``; returns ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    cfg = _cfg()

    def fresh(serial: str, **kw) -> pl.DataFrame:
        return good_frame(rng, serial, cfg=cfg, **kw)

    def csv(name: str, df: pl.DataFrame) -> Path:
        p = folder / name
        df.write_csv(p)
        return p

    csv("good_1.csv", fresh("TB7-9001"))
    fresh("TB7-9002").write_parquet(folder / "good_2.parquet")

    (folder / "empty.csv").write_bytes(b"")
    (folder / "header_only.csv").write_text(",".join(fresh("x").columns) + "\n")
    fresh("TB7-9003").write_parquet(folder / "_whole.parquet")
    whole = (folder / "_whole.parquet").read_bytes()
    (folder / "_whole.parquet").unlink()
    (folder / "truncated.parquet").write_bytes(whole[: len(whole) * 2 // 3])
    (folder / "not_parquet.parquet").write_bytes(rng.bytes(3000))

    lines = fresh("TB7-9004").write_csv().splitlines(keepends=True)
    half = len(lines) // 2
    (folder / "ragged_line.csv").write_text("".join(lines[:half]) + "#### LOGGER RESTART ####\n" + "".join(lines[half:]))
    lines = fresh("TB7-9005").write_csv().splitlines(keepends=True)
    (folder / "long_line.csv").write_text("".join(lines[:half]) + lines[half].rstrip("\n") + ",1,2,3\n"
                                          + "".join(lines[half + 1:]))
    fresh("TB7-9006").write_csv(folder / "wrong_delimiter.csv", separator=";")
    dc = fresh("TB7-9007").with_columns(pl.col("voltage_v").cast(pl.String).str.replace(".", ",", literal=True))
    csv("decimal_comma.csv", dc)
    txt = fresh("TB7-9008").with_columns(pl.col("current_a").cast(pl.String))
    txt = txt.with_columns(pl.when(pl.int_range(pl.len()) == 321).then(pl.lit("ERR")).otherwise("current_a").alias("current_a"))
    csv("text_in_numbers.csv", txt)
    lat = fresh("TB7-9009").with_columns(pl.lit("TB7-9009-Schweißnaht").alias("serial"))
    (folder / "latin1.csv").write_bytes(lat.write_csv().encode("latin-1"))
    (folder / "binary_nul.csv").write_bytes(fresh("TB7-9010").write_csv().encode()[:2000] + b"\0" * 4096)
    csv("missing_column.csv", fresh("TB7-9011").drop("wfs_m_min"))
    csv("all_null_voltage.csv", fresh("TB7-9012").with_columns(pl.lit(None, dtype=pl.Float64).alias("voltage_v")))
    csv("current_in_kA.csv", fresh("TB7-9013").with_columns((pl.col("current_a") / 1000).round(4)))
    csv("wfs_in_in_min.csv", fresh("TB7-9014").with_columns((pl.col("wfs_m_min") / 0.0254).round(1)))

    df = fresh("TB7-9015")
    csv("sentinel_values.csv", df.with_columns(
        pl.when(_mid_seam(df, length=0.03)).then(-9999.0).otherwise("current_a").alias("current_a")))
    df = fresh("TB7-9016")
    csv("negative_voltage.csv", df.with_columns(
        pl.when(_mid_seam(df)).then(-pl.col("voltage_v")).otherwise("voltage_v").alias("voltage_v")))
    df = fresh("TB7-9017")
    csv("nan_burst.csv", df.with_columns(
        pl.when(_mid_seam(df)).then(float("nan")).otherwise("voltage_v").alias("voltage_v")))
    df = fresh("TB7-9018")
    csv("logging_gap.csv", df.filter(~_mid_seam(df)))
    df = fresh("TB7-9019")
    csv("duplicate_timestamps.csv", pl.concat([df, df.filter(_mid_seam(df, length=0.1))]).sort("time", maintain_order=True))
    df = fresh("TB7-9020")
    back = _mid_seam(df, length=0.3)
    csv("backwards_time.csv", pl.concat([df.filter(pl.int_range(pl.len()) < 400), df.filter(back).reverse(),
                                         df.filter(pl.int_range(pl.len()) >= 400)]).unique(maintain_order=True))
    df = fresh("TB7-9021")
    # the same instants, half of them written in +01:00 local time
    local = (pl.col("time").str.to_datetime(time_zone="UTC").dt.convert_time_zone("Europe/Berlin")
             .dt.strftime("%Y-%m-%dT%H:%M:%S%.3f%:z"))
    csv("mixed_offsets.csv", df.with_columns(
        pl.when(pl.int_range(pl.len()) % 2 == 1).then(local).otherwise("time").alias("time")))
    df = fresh("TB7-9022")
    csv("naive_and_offset.csv", df.with_columns(
        pl.when(pl.int_range(pl.len()) >= 500).then(pl.col("time").str.replace(r"\+00:00$", "")).otherwise("time")
        .alias("time")))
    df = fresh("TB7-9023")
    csv("no_arc_seam.csv", df.with_columns(
        pl.when(pl.col("seam") == "S2").then(0.2).otherwise("current_a").alias("current_a")))
    csv("short_seam.csv", fresh("TB7-9024", durations=(2.5, 3.0, 0.6)))

    sparse = folder / "sparse_10gb.csv"
    sparse.write_bytes(b"")
    with open(sparse, "r+b") as fh:
        fh.truncate(10 * 10**9)  # 10 GB long, no blocks written: a pre-allocated logger file

    for a, b in (("loop_a.csv", "loop_b.csv"), ("loop_b.csv", "loop_a.csv")):
        if not (folder / a).is_symlink():
            os.symlink(b, folder / a)
    sub = folder / "nested"
    sub.mkdir(exist_ok=True)
    if not (sub / "up").is_symlink():
        os.symlink("..", sub / "up")  # a folder link back up: a walk that follows it never ends
    return folder


if __name__ == "__main__":
    out = build_corpus(Path(sys.argv[1] if len(sys.argv) > 1 else "bad-input-corpus"))
    for c in CASES:
        print(f"{c.name:28s} {c.outcome:9s} {c.kind}")
    print(f"written to {out}")
