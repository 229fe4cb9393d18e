"""The one-pass batch engine: file-level checks against pandas, and results that do not depend on
how the file is cut into batches or on how many threads polars uses.

Reference for the checks: pandas (a reference library) counting the same things on the same
file — nulls per channel, readings outside the plausibility limits, repeated timestamps, the
distinct (serial, seam) labels.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import polars as pl
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from ingest.onepass import aggregate_file
from ingest.reader import HARD_LIMITS
from monitor.config import load_config

ROOT = Path(__file__).resolve().parent.parent
CFG = load_config(ROOT / "config")
SPEC, ARC = CFG.cell.export, CFG.cell.arc


def _night(path: Path, n_seams: int = 9, rate: float = 500.0, seed: int = 2) -> pd.DataFrame:
    """A labelled export with sensor sentinels, dropouts and repeated timestamps (demo columns)."""
    rng = np.random.default_rng(seed)
    n_idle, n_seam = int(0.4 * rate), int(3.0 * rate)
    per = n_idle + n_seam
    n = per * n_seams
    pos = np.arange(n)
    in_seam = pos % per >= n_idle
    k = pos // per
    t_ms = (pos * 1000 / rate).astype(np.int64)
    t_ms[1000] = t_ms[999]  # repeated timestamps
    t_ms[4321] = t_ms[4320]
    cur = np.where(in_seam, 210 + rng.normal(0, 15, n), np.abs(rng.normal(0, 0.3, n)))
    cur[2000:2040] = np.nan  # a current dropout inside a seam
    cur[3000] = -9999.0  # sentinel
    volt = np.where(in_seam, 24 + rng.normal(0, 1, n), 0.4)
    volt[5000:5003] = 1e9  # saturated channel
    df = pd.DataFrame({
        "time": pd.Timestamp("2026-11-30T22:00:00Z") + pd.to_timedelta(t_ms, unit="ms"),
        "part": "TB7-tow-bracket",
        "serial": [f"TB7-{j // 3:04d}" for j in k],
        "seam": np.where(in_seam, np.array(["S1", "S2", "S3"])[k % 3], None),
        "current_a": cur.round(1),
        "voltage_v": volt.round(2),
        "wfs_m_min": np.where(in_seam, 9.0 + rng.normal(0, 0.05, n), 0.0).round(3),
        "travel_mm_s": np.where(in_seam, 8.0, 0.0),
    })
    df.to_parquet(path, row_group_size=256)  # small row groups: batches of a few hundred rows possible
    return df


def test_file_checks_equal_pandas_at_any_batch_size(tmp_path):
    path = tmp_path / "n.parquet"
    d = _night(path)
    want = {"rows": len(d), "dup_t": int((d["time"] == d["time"].shift(1)).sum())}
    for alias, col, scale in (("current", "current_a", 1.0), ("voltage", "voltage_v", 1.0),
                              ("wire_feed", "wfs_m_min", 1 / 60)):
        x = d[col] * scale
        lo, hi = HARD_LIMITS[alias]
        ok = x.between(lo, hi)
        want[f"{alias}_nulls"] = int(x.isna().sum())
        want[f"{alias}_absurd"] = int((x.notna() & ~ok).sum())
        if alias == "current":
            want["current_max"] = float(x[ok].max())
    labels = d.dropna(subset=["seam"])
    want_labels = sorted(set(labels["serial"] + "\u241f" + labels["seam"]))
    for chunk in (1_000_000, 1000, 999, 37):  # 1000: a repeated timestamp exactly on a batch boundary
        q = aggregate_file(path, SPEC, ARC, chunk_rows=chunk).quality
        for key, value in want.items():
            assert q[key] == pytest.approx(value, rel=1e-12), (chunk, key)
        assert q["seam_labels"] == want_labels


def test_nan_and_null_readings_counted_apart_at_any_batch_size(tmp_path):
    # A NaN stored in the file (not a null) is a dropout, never an "impossible reading"; a batch
    # with neither costs no NaN count. Reference: pyarrow.compute on the stored column.
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    src = tmp_path / "n.parquet"
    _night(src)
    d = pl.read_parquet(src)
    i = pl.int_range(pl.len())
    nan = pl.lit(float("nan"))
    d = d.with_columns(  # stored as NaN beside the nulls already there: polars keeps the two apart
        pl.when(i.is_between(7000, 7009)).then(nan).otherwise(pl.col("current_a")).alias("current_a"),
        pl.when(i >= pl.len() - 5).then(nan).otherwise(pl.col("voltage_v")).alias("voltage_v"))  # last batch only
    path = tmp_path / "nan.parquet"
    d.write_parquet(path, row_group_size=256)  # batches of a few hundred rows possible
    table = pq.read_table(path)
    want = {}
    for alias, col, scale in (("current", "current_a", 1.0), ("voltage", "voltage_v", 1.0),
                              ("wire_feed", "wfs_m_min", 1 / 60)):
        arr = table.column(col)
        lo, hi = HARD_LIMITS[alias]
        nan = pc.fill_null(pc.is_nan(arr), False)
        x = pc.multiply(arr, scale)
        ok = pc.fill_null(pc.and_(pc.greater_equal(x, lo), pc.less_equal(x, hi)), False)
        want[f"{alias}_nulls"] = arr.null_count
        want[f"{alias}_absurd"] = pc.sum(pc.and_(pc.and_(pc.is_valid(arr), pc.invert(nan)), pc.invert(ok))).as_py() or 0
    assert want["current_nulls"] > 0 and want["current_absurd"] == 1 and want["voltage_absurd"] == 3
    for chunk in (1_000_000, 1000, 37):
        q = aggregate_file(path, SPEC, ARC, chunk_rows=chunk).quality
        assert {k: q[k] for k in want} == want, chunk


def _frame_bytes(df: pl.DataFrame) -> bytes:
    # exact comparison: every column's values and validity, floats by their bits
    return df.rechunk().write_ipc(None).getvalue()


def test_batch_size_changes_no_count_and_floats_only_in_rounding(tmp_path):
    path = tmp_path / "n.parquet"
    _night(path)
    ref = aggregate_file(path, SPEC, ARC).aggregates
    assert ref.height == 9
    for chunk in (4096, 1000, 333):
        got = aggregate_file(path, SPEC, ARC, chunk_rows=chunk).aggregates
        floats = [c for c, t in ref.schema.items() if t.is_float()]
        assert got.drop(floats).equals(ref.drop(floats), null_equal=True)
        for c in floats:
            np.testing.assert_allclose(got[c].to_numpy(), ref[c].to_numpy(), rtol=1e-13, atol=0, equal_nan=True)


def test_a_batch_whose_time_goes_backwards_joins_the_sorted_ones_in_file_order(tmp_path, monkeypatch):
    # Batches whose time never goes backwards are reduced to arrays, one whose time does to a
    # frame (the general form); the file's seams come out in file order with the same values
    # as the whole-file form (ingest.seams.seam_aggregates), whichever form reduced each batch.
    from ingest import onepass
    from ingest.reader import scan_samples
    from ingest.seams import seam_aggregates

    df = _night(tmp_path / "n.parquet")
    # swap two samples inside the fifth seam: its batch takes the general form
    i = 4 * 1700 + 200 + 1000
    df.loc[[i, i + 1], "time"] = df.loc[[i + 1, i], "time"].to_numpy()
    path = tmp_path / "back.parquet"
    df.to_parquet(path, row_group_size=256)
    forms = []
    real_sorted, real_any = onepass._reduce_sorted_runs, onepass._reduce_any_runs
    monkeypatch.setattr(onepass, "_reduce_sorted_runs", lambda *a: forms.append("sorted") or real_sorted(*a))
    monkeypatch.setattr(onepass, "_reduce_any_runs", lambda *a: forms.append("any") or real_any(*a))
    got = aggregate_file(path, SPEC, ARC, chunk_rows=1000).aggregates
    assert forms.count("any") == 1 and forms.count("sorted") > 5
    want = seam_aggregates(scan_samples(path, SPEC).frame, ARC, labelled=True).collect()
    assert got.height == want.height == 9
    assert got.get_column("serial").to_list() == sorted(got.get_column("serial").to_list())
    floats = [c for c, t in want.schema.items() if t.is_float()]
    assert got.drop(floats).equals(want.drop(floats), null_equal=True)
    for c in floats:
        np.testing.assert_allclose(got[c].to_numpy(), want[c].to_numpy(), rtol=1e-12, atol=0, equal_nan=True)
    # the swapped pair is inside the fifth seam's window: its smallest step is negative
    steps = got.get_column("min_step_s").to_list()
    assert steps[4] < 0 <= min(steps[:4] + steps[5:])


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(chunk=st.integers(min_value=2, max_value=6000))
def test_any_batch_size_finds_the_same_seams(tmp_path, chunk):
    path = tmp_path / "h.parquet"
    if not path.exists():
        _night(path, n_seams=4, rate=400.0)
    ref = aggregate_file(path, SPEC, ARC)
    got = aggregate_file(path, SPEC, ARC, chunk_rows=chunk)
    cols = ["seam", "serial", "part", "n_samples", "n_trimmed", "current_bad", "voltage_bad", "wire_feed_bad"]
    assert got.aggregates.select(cols).equals(ref.aggregates.select(cols))
    assert got.quality == ref.quality


_SCAN = """
import json, sys, hashlib
from pathlib import Path
from ingest.onepass import aggregate_file
from monitor.config import load_config
cfg = load_config(Path(sys.argv[2]))
agg = aggregate_file(Path(sys.argv[1]), cfg.cell.export, cfg.cell.arc).aggregates
print(json.dumps({"sha": hashlib.sha256(agg.rechunk().write_ipc(None).getvalue()).hexdigest(), "n": agg.height}))
"""


def test_same_bits_whatever_the_thread_count(tmp_path):
    # "Bit for bit" (the requirement): each seam's sums run over one contiguous slice in
    # file order, so neither the number of polars threads nor a second run changes a bit.
    path = tmp_path / "n.parquet"
    _night(path)
    seen = set()
    for threads in ("1", "2", "3"):
        env = {**os.environ, "PYTHONPATH": str(ROOT), "POLARS_MAX_THREADS": threads}
        out = subprocess.run([sys.executable, "-c", _SCAN, str(path), str(ROOT / "config")], capture_output=True,
                             text=True, env=env, check=True, cwd=ROOT)
        got = json.loads(out.stdout.strip().splitlines()[-1])
        assert got["n"] == 9
        seen.add(got["sha"])
    here = aggregate_file(path, SPEC, ARC).aggregates
    assert _frame_bytes(here) == _frame_bytes(aggregate_file(path, SPEC, ARC).aggregates)
    assert len(seen) == 1



@st.composite
def _sorted_runs(draw):
    """A batch of complete runs as the engine hands them to the reduction: time never goes
    backwards (repeats allowed), runs of any length (shorter than the trims too), channels with
    nulls, zeros and negative readings, travel speed with NaN and infinities."""
    lens = draw(st.lists(st.integers(1, 40), min_size=1, max_size=6))
    n = sum(lens)
    steps = draw(st.lists(st.sampled_from([0, 1, 1, 1, 2, 7, 300]), min_size=n, max_size=n))
    abs_ms = 1_700_000_000_000 + np.cumsum(steps).astype(np.int64)
    vals = st.one_of(st.none(), st.sampled_from([0.0, -5.0]), st.floats(0.5, 400.0))

    def chan(extra=()):
        return draw(st.lists(st.one_of(vals, *extra), min_size=n, max_size=n))

    return pl.DataFrame({
        "t": ((abs_ms - abs_ms[0]) * 1000).astype(np.float64) / 1e6,
        "_abs": abs_ms,
        "current": pl.Series(chan(), dtype=pl.Float64),
        "voltage": pl.Series(chan(), dtype=pl.Float64),
        "wire_feed": pl.Series(chan(), dtype=pl.Float64),
        "travel_speed": pl.Series(chan((st.sampled_from([float("nan"), float("inf")]),)), dtype=pl.Float64),
        "_pos": np.arange(100, 100 + n, dtype=np.int64),
        "tip_change": draw(st.lists(st.booleans(), min_size=n, max_size=n)),
        # a batch kept whole holds runs out of arc too, dropped by the reduction
        "_live": np.repeat(draw(st.lists(st.booleans(), min_size=len(lens), max_size=len(lens))), lens),
        # run keys rise along the file, with gaps where a run kept no arc-on row
        "_key": np.repeat(5 + np.cumsum(draw(st.lists(st.integers(1, 3), min_size=len(lens), max_size=len(lens)))),
                          lens).astype(np.int64),
    })


@settings(max_examples=200, deadline=None)
@given(df=_sorted_runs(), trims=st.sampled_from([(0.5, 0.3), (0.0, 0.0), (0.004, 0.002), (0.01, 0.0)]))
def test_sorted_time_reduction_equals_the_general_form(df, trims):
    # The reduction used when time never goes backwards (positions, binary search, numpy
    # extremes) against the general one written in polars expressions: the same counts, bounds,
    # steps and flags exactly, and means to rounding.
    from ingest.onepass import _reduce_any_runs, _reduce_sorted_runs, _runs_frame
    from ingest.schema import ArcSettings

    arc = ArcSettings(trim_start=trims[0], trim_end=trims[1])
    tn = df["t"].to_numpy()
    got = _runs_frame([_reduce_sorted_runs(df, tn, np.append(np.diff(tn), 0.0), arc, True)])
    want = _reduce_any_runs(df, arc, True)
    assert got.schema == want.schema
    means = [c for c in want.columns if c.endswith("_mean")]
    assert got.drop(means).equals(want.drop(means), null_equal=True)
    for c in means:
        g, w = got[c].to_numpy(), want[c].to_numpy()
        np.testing.assert_allclose(g, w, rtol=1e-13, atol=0, equal_nan=True)
        assert (got[c].is_null() == want[c].is_null()).all()


def test_read_ahead_keeps_file_order_raises_in_order_and_stops():
    import time

    from ingest.onepass import _read_ahead

    started = []

    def load(i, wait):
        def run():
            started.append(i)
            time.sleep(wait)
            if i == 4:
                raise OSError("cut file")
            return i
        return run

    # the first window is the slowest: order is the file's, not the finishing order
    it = _read_ahead([load(i, w) for i, w in enumerate([0.2, 0.0, 0.05, 0.0, 0.0, 0.0])])
    assert [next(it) for _ in range(4)] == [0, 1, 2, 3]
    with pytest.raises(OSError, match="cut file"):
        next(it)
    # a consumer that stops early: loads not yet started never start
    started.clear()
    it = _read_ahead([load(i, 0.0) for i in range(10, 20)], workers=2)
    assert next(it) == 10
    it.close()
    time.sleep(0.1)
    assert len(started) <= 3


def test_nothing_of_a_batch_outlives_it_by_long(tmp_path, monkeypatch):
    # Peak memory must not grow with the file's length (the bounded-memory requirement).
    # The per-row arrays made for each batch (run numbers) must be freed within a few batches: a
    # small value kept from a batch that is a zero-copy slice of such an array (polars returns a
    # slice when the kept rows are one block) keeps all of it alive until the end of the pass,
    # about 8 bytes a row (found on a 210 M-row night).
    import gc
    import weakref

    import ingest.onepass as onepass

    path = tmp_path / "n.parquet"
    pl.from_pandas(_night(path, n_seams=30)).write_parquet(path, row_group_size=1000)  # read by row groups
    made: list = []
    alive_most = [0]

    class _NumpyWatch:
        def __getattr__(self, name):
            return getattr(np, name)

        @staticmethod
        def repeat(*args, **kwargs):
            out = np.repeat(*args, **kwargs)
            if out.size >= 500:  # per-row arrays, not per-run ones
                gc.collect()
                alive_most[0] = max(alive_most[0], sum(r() is not None for r in made))
                made.append(weakref.ref(out))
            return out

    monkeypatch.setattr(onepass, "np", _NumpyWatch())
    got = aggregate_file(path, SPEC, ARC, chunk_rows=1000)
    assert got.aggregates.height == 30
    assert len(made) >= 40  # the watch saw the batches' run numbers
    # the batch at hand, the one carried over, two being reduced, two read ahead
    assert alive_most[0] <= 6, (alive_most[0], len(made))


@pytest.mark.parametrize("fmt", ["ms", "us", "ns", "csv"])
def test_batch_canonical_samples_equal_the_whole_file_form_bit_for_bit(tmp_path, fmt):
    # The batch form (plan.canonical, per batch, from the stored time) and the whole-file lazy
    # form (samples.frame) must give the same floats, bit for bit: a time one ulp off moves a
    # sample across the trim window's edge. (In polars 2.1, milliseconds / 1e3 and
    # microseconds / 1e6 differ in the last bit for about 4 in 10 values.)
    from ingest.reader import scan_samples

    d = pl.from_pandas(_night(tmp_path / "n.parquet"))
    if fmt == "csv":
        path = tmp_path / "n.csv"
        d.write_csv(path)
    else:  # timestamps stored in that unit
        path = tmp_path / f"n_{fmt}.parquet"
        d.with_columns(pl.col("time").dt.cast_time_unit(fmt)).write_parquet(path)
    samples = scan_samples(path, SPEC)
    plan = samples.plan
    raw = plan.source.collect()
    origin = raw.head(1).select(plan.origin).item()
    cols = ["t", "current", "voltage", "wire_feed", "travel_speed"]
    got = pl.concat([plan.canonical(raw.slice(o, 2000), origin).select(cols) for o in range(0, raw.height, 2000)])
    want = samples.frame.select(cols).collect()
    assert got.equals(want, null_equal=True)


@st.composite
def _cell_log(draw):
    """A labelled export of a few seams at 1 kHz, in row groups of a random size: idle rows between
    seams, labels raised over arc-off rows before the arc strikes and held after it goes out (gas
    pre- and post-flow; common practice, no source), and short arc-off dips inside a seam."""
    rows: list[tuple[str | None, float]] = []
    for k in range(draw(st.integers(1, 4))):
        label = f"S{k % 2 + 1}" if k < 2 else f"S{k + 1}"
        rows += [(None, 0.3)] * draw(st.integers(1, 60))
        rows += [(label, 0.2)] * draw(st.sampled_from([0, 0, 3, 40]))  # pre-flow
        for _ in range(draw(st.integers(1, 3))):
            rows += [(label, 200.0)] * draw(st.integers(1, 250))
            rows += [(label, 5.0)] * draw(st.sampled_from([0, 0, 1, 7]))  # a dip below the threshold
        rows += [(label, 0.2)] * draw(st.sampled_from([0, 0, 2, 30]))  # post-flow
    rows += [(None, 0.3)] * draw(st.integers(0, 20))
    n = len(rows)
    rng = np.random.default_rng(draw(st.integers(0, 2**16)))
    cur = np.array([c for _, c in rows]) + rng.normal(0, 0.5, n).round(1)
    df = pl.DataFrame({
        "time": pl.Series(1_700_000_000_000 + np.arange(n, dtype=np.int64)).cast(pl.Datetime("ms", "UTC")),
        "serial": "P-1",
        "seam": pl.Series([lab for lab, _ in rows], dtype=pl.String),
        "current_a": cur,
        "voltage_v": np.where(cur > 30, 24 + rng.normal(0, 1, n), 0.4).round(2),
        "wfs_m_min": np.where(cur > 30, 9.0, 0.0),
        "travel_mm_s": np.where(cur > 30, 8.0, 0.0),
    })
    return df, draw(st.integers(7, 300)), draw(st.integers(2, 900))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(case=_cell_log())
def test_labels_over_arc_off_rows_give_the_whole_file_forms_seams_at_any_batch_size(tmp_path, case):
    # Batches kept whole and batches filtered to their arc-on rows, in any mix and with seams cut
    # anywhere, give what the whole-file lazy window form (ingest.seams) gives for the same file.
    from ingest.reader import scan_samples
    from ingest.schema import ArcSettings
    from ingest.seams import seam_aggregates

    df, row_group, chunk = case
    path = tmp_path / "g.parquet"
    df.write_parquet(path, row_group_size=row_group)
    arc = ArcSettings(trim_start=0.004, trim_end=0.002, min_duration=0.001)
    got = aggregate_file(path, SPEC, arc, chunk_rows=chunk).aggregates
    want = seam_aggregates(scan_samples(path, SPEC).frame, arc, labelled=True).collect().sort("start_s")
    exact = ["seam", "serial", "start", "n_samples", "n_trimmed", "current_bad", "voltage_bad", "wire_feed_bad"]
    assert got.select(exact).equals(want.select(exact), null_equal=True)
    # seconds may differ in the last bit between the two forms: polars divides a column by a
    # constant through its reciprocal but folds a constant expression exactly (7 ms gives 0.007
    # in one form, 0.006999999999999999 in the other), and a duration is a difference of such
    # times; the timestamps ("start", integer microseconds) are exact
    for c in ("start_s", "arc_time_s", "used_time_s", "max_gap_s", "min_step_s", "current_mean", "current_sq_mean",
              "voltage_mean", "power_mean", "wire_feed_mean"):
        np.testing.assert_allclose(got[c].to_numpy(), want[c].to_numpy(), rtol=1e-12, equal_nan=True)


@pytest.mark.parametrize("row_group", [3, 7, 9])
def test_a_sample_exactly_on_a_trim_edge_is_inside_the_window_in_every_form(tmp_path, row_group):
    # Trims are usually whole multiples of the sample period, so samples fall exactly on the
    # window's edges; such a sample is inside the window (common practice, no source: a window
    # [a, b] of a seam's arc-on time is read as closed). The two forms may round the same time
    # one ulp apart (0.007 against 0.006999999999999999, see above); they must still agree.
    # Here: arc on at 1..7 ms, trims 4 ms and 2 ms, so the window is [5 ms, 5 ms], one sample.
    from ingest.reader import scan_samples
    from ingest.schema import ArcSettings
    from ingest.seams import seam_aggregates

    n = 9
    lab = [None] + ["S1"] * 7 + [None]
    cur = [0.3] + [200.0] * 7 + [0.3]
    df = pl.DataFrame({
        "time": pl.Series(1_700_000_000_000 + np.arange(n, dtype=np.int64)).cast(pl.Datetime("ms", "UTC")),
        "serial": "P-1",
        "seam": pl.Series(lab, dtype=pl.String),
        "current_a": cur,
        "voltage_v": [0.4] + [24.0] * 7 + [0.4],
        "wfs_m_min": [0.0] + [9.0] * 7 + [0.0],
        "travel_mm_s": [0.0] + [8.0] * 7 + [0.0],
    })
    path = tmp_path / "edge.parquet"
    df.write_parquet(path, row_group_size=row_group)
    arc = ArcSettings(trim_start=0.004, trim_end=0.002, min_duration=0.001)
    got = aggregate_file(path, SPEC, arc, chunk_rows=row_group).aggregates
    want = seam_aggregates(scan_samples(path, SPEC).frame, arc, labelled=True).collect()
    for form in (got, want):
        assert form.select("seam", "n_samples", "n_trimmed").rows() == [("S1", 1, 6)]


_LABELS = ["TB7-tow-bracket", "TB7-row-bracket", "TB7-tow-bracket-LH", "SR40-seat-rail", "S1", "", "cell-3 long label ünïcode"]


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(runs=st.lists(st.tuples(st.sampled_from([*_LABELS, None]), st.integers(1, 120)), min_size=1, max_size=12),
       before=st.sampled_from([*_LABELS, None]), first_batch=st.booleans(), cut=st.integers(0, 40),
       via=st.sampled_from(["parquet", "csv", "memory"]))
@example(runs=[("TB7-tow-bracket", 50), ("TB7-row-bracket", 50)], before=None, first_batch=False, cut=0, via="parquet")
@example(runs=[("TB7-tow-bracket", 50), ("TB7-row-bracket", 50)], before=None, first_batch=False, cut=3, via="csv")
@example(runs=[("TB7-tow-bracket", 50), ("", 20), (None, 20), ("", 20)], before=None, first_batch=True, cut=0,
         via="parquet")
def test_text_changes_equal_polars_string_comparison(tmp_path, runs, before, first_batch, cut, via):
    # Reference: polars' own string comparison of each row with the row before (ne_missing, a
    # null equal to a null), the first row with the previous batch's last value. The engine takes
    # a shortcut through the string views of long values, which must not change any answer,
    # whether the column was decoded from a Parquet dictionary (rows share their bytes), parsed
    # from CSV (every row has bytes of its own) or built in memory, and for a batch cut out of a
    # longer column (a view array with an offset).
    from ingest.onepass import _changes

    values = [v for v, k in runs for _ in range(k)]  # labels come in runs, as a seam's rows do
    col = pl.DataFrame({"part": pl.Series(values, dtype=pl.String)})
    if via == "parquet":
        col.write_parquet(tmp_path / "t.parquet")
        col = pl.read_parquet(tmp_path / "t.parquet")
    elif via == "csv":
        col.write_csv(tmp_path / "t.csv")
        col = pl.read_csv(tmp_path / "t.csv", schema={"part": pl.String})
    s = col.get_column("part").slice(min(cut, col.height - 1))
    got = _changes(s, before, first_batch)
    prev = pl.concat([pl.Series([before], dtype=pl.String), s.slice(0, len(s) - 1)])
    want = s.ne_missing(prev)
    if first_batch:
        want[0] = True
    want = np.flatnonzero(want.to_numpy())
    assert got.dtype == np.int64
    assert got.tolist() == want.tolist()
    assert _changes(s, before, first_batch, views=False).tolist() == want.tolist()  # a text export's path


def test_text_changes_of_a_dictionary_decoded_column_take_the_view_shortcut(tmp_path):
    # The shortcut is taken where it pays (a long label decoded from a Parquet dictionary: few
    # view changes), and its answer is the plain comparison's.
    from ingest import onepass

    parts = np.array(["TB7-tow-bracket", "SR40-seat-rail-LH"])[(np.arange(20_000) // 3000) % 2]
    pl.DataFrame({"part": parts}).write_parquet(tmp_path / "p.parquet")
    s = pl.read_parquet(tmp_path / "p.parquet").get_column("part")
    calls = []
    real = pl.Series.ne_missing

    def spy(self, other):
        calls.append(len(self))
        return real(self, other)

    pl.Series.ne_missing = spy
    try:
        got = onepass._changes(s, "TB7-tow-bracket", False)
    finally:
        pl.Series.ne_missing = real
    assert got.tolist() == list(range(3000, 20_000, 3000))
    assert max(calls) < 100  # the first row and the candidates, not the whole column


def test_a_channel_without_limits_keeps_exactly_the_valid_readings():
    # The engine tests a channel without plausibility limits (travel speed) as 0 < x < inf; it must
    # keep exactly what ingest.seams.valid_reading (present, finite, positive) keeps, for the IEEE
    # 754 special values (NaN, both infinities, both zeros, a subnormal) as well as plain numbers.
    from ingest.onepass import _valid_kept
    from ingest.seams import valid_reading

    x = [None, float("nan"), float("inf"), -float("inf"), 0.0, -0.0, -1.0, 5e-324, 1e-310, 0.008, 1e300]
    d = pl.DataFrame({"travel_speed": pl.Series(x, dtype=pl.Float64)})
    got = d.select(_valid_kept("travel_speed")).to_series()
    want = d.select(pl.when(valid_reading("travel_speed")).then(pl.col("travel_speed"))).to_series()
    assert got.is_null().to_list() == want.is_null().to_list() == [True] * 7 + [False] * 4
    assert got.equals(want, null_equal=True)
