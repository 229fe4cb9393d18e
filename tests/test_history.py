"""Results history: append-only hive-partitioned Parquet, de-duplicated by input checksum."""

from __future__ import annotations

import hashlib
import shutil
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import pandas as pd
import polars as pl
import pytest
from click.testing import CliRunner

from monitor.cli import main
from monitor.history import append_history, known_inputs, read_history, scan_history

REPO = Path(__file__).resolve().parent.parent


def rows(part: str, source: str, day: datetime, n: int = 3) -> pl.DataFrame:
    return pl.DataFrame({
        "source": [source] * n, "part": [part] * n, "serial": [f"{source}-s"] * n,
        "seam": [f"S{i + 1}" for i in range(n)],
        "start": [day + timedelta(seconds=10 * i) for i in range(n)],
        "ctwd_mm": [15.0 + i for i in range(n)], "status": ["ok"] * n, "reason": ["x"] * n,
    }).with_columns(pl.col("start").dt.cast_time_unit("us"))


def sha(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()


NIGHT = datetime(2026, 11, 28, 22, 30, tzinfo=UTC)


def test_append_partitions_and_dedup(tmp_path):
    h = tmp_path / "results"
    a = append_history(h, rows("TB7", "a.parquet", NIGHT), [("a.parquet", sha("a"))])
    assert a.rows_added == 3
    run_sum = sha(sha("a"))[:32]  # the file is named by the checksum of its sorted input checksums
    assert [p.relative_to(h).as_posix() for p in a.files_written] == [f"part=TB7/date=2026-11-28/{run_sum}.parquet"]
    before = {p: p.read_bytes() for p in h.rglob("*.parquet")}
    again = append_history(h, rows("TB7", "a.parquet", NIGHT), [("a.parquet", sha("a"))])
    assert again.rows_added == 0 and again.inputs_already_present == (sha("a"),)
    # same bytes under another name: still the same input
    renamed = append_history(h, rows("TB7", "copy.parquet", NIGHT), [("copy.parquet", sha("a"))])
    assert renamed.rows_added == 0
    b = append_history(h, rows("TB7", "b.parquet", NIGHT + timedelta(days=1)), [("b.parquet", sha("b"))])
    assert b.rows_added == 3
    # old partition files are never rewritten
    assert all(p.read_bytes() == data for p, data in before.items())
    assert known_inputs(h) == {sha("a"), sha("b")}
    df = read_history(h, part="TB7")
    assert df.height == 6 and df.get_column("part").unique().to_list() == ["TB7"]
    assert df.get_column("date").unique().sort().to_list() == [date(2026, 11, 28), date(2026, 11, 29)]
    assert read_history(h, part="TB7", since=date(2026, 11, 29)).height == 3
    assert isinstance(scan_history(h, part="TB7"), pl.LazyFrame)


def test_part_names_cannot_escape_the_history(tmp_path):
    h = tmp_path / "deep" / "results"
    res = append_history(h, rows("../../etc", "x.csv", NIGHT), [("x.csv", sha("x"))])
    assert res.rows_added == 3
    for p in tmp_path.rglob("*.parquet"):
        assert h.resolve() in p.resolve().parents
    assert [p.parent.parent.name for p in res.files_written] == ["part=etc"]
    back = read_history(h, part="../../etc")
    assert back.get_column("part").unique().to_list() == ["../../etc"]


def test_a_failed_write_leaves_nothing_behind(tmp_path, monkeypatch):
    h = tmp_path / "results"
    append_history(h, rows("TB7", "a.parquet", NIGHT), [("a.parquet", sha("a"))])

    def boom(self, path, *a, **k):
        Path(path).write_bytes(b"PAR1 half a file")
        raise OSError("disk full")

    monkeypatch.setattr(pl.DataFrame, "write_parquet", boom)
    with pytest.raises(OSError):
        append_history(h, rows("TB7", "b.parquet", NIGHT), [("b.parquet", sha("b"))])
    monkeypatch.undo()
    # no torn file in the partitions, no leftover staging file, old content intact and readable
    assert sorted(p.name for p in h.rglob("*.parquet")) == [f"{sha(sha('a'))[:32]}.parquet"]
    assert list(h.glob(".staging/*")) == []
    assert read_history(h).height == 3


def test_cli_scan_appends_once_and_history_exports(tmp_path):
    logs = tmp_path / "logs"
    logs.mkdir()
    for f in sorted((REPO / "sample_logs" / "cell3").glob("*.parquet"))[:4]:
        shutil.copy(f, logs / f.name)
    cfg = tmp_path / "config"
    shutil.copytree(REPO / "config", cfg)
    r = CliRunner()
    first = r.invoke(main, ["scan", str(logs), "--config", str(cfg), "--out", str(tmp_path / "o1"), "--no-page"])
    assert first.exit_code == 0, first.output
    assert "(+12 rows; 0 inputs already in it)" in first.output
    hist = tmp_path / "results"  # default: beside the config folder
    assert hist.is_dir()
    second = r.invoke(main, ["scan", str(logs), "--config", str(cfg), "--out", str(tmp_path / "o2"), "--no-page"])
    assert "(+0 rows; 4 inputs already in it)" in second.output
    out = tmp_path / "tb7.csv"
    res = r.invoke(main, ["history", "--part", "TB7-tow-bracket", "--since", "2026-11-30", "--config", str(cfg),
                          "--output", str(out)])
    assert res.exit_code == 0, res.output
    # cross-check with pandas: 4 files x 3 seams, one row a seam, all on the night's date
    df = pd.read_csv(out)
    assert len(df) == 12 and set(df["seam"]) == {"S1", "S2", "S3"}
    assert (pd.to_datetime(df["start"]).dt.date == date(2026, 11, 30)).all()
    pq = r.invoke(main, ["history", "--part", "TB7-tow-bracket", "--history", str(hist), "--format", "parquet",
                         "--output", str(tmp_path / "tb7.parquet")])
    assert pq.exit_code == 0 and pl.read_parquet(tmp_path / "tb7.parquet").height == 12
    none = r.invoke(main, ["history", "--part", "TB7-tow-bracket", "--history", str(hist), "--since", "2027-01-01"])
    assert none.exit_code == 1 and "no rows" in none.output


def test_no_history_writes_none(tmp_path):
    logs = tmp_path / "logs"
    logs.mkdir()
    f = sorted((REPO / "sample_logs" / "cell3").glob("*.parquet"))[0]
    shutil.copy(f, logs / f.name)
    cfg = tmp_path / "config"
    shutil.copytree(REPO / "config", cfg)
    res = CliRunner().invoke(main, ["scan", str(logs), "--config", str(cfg), "--out", str(tmp_path / "o"),
                                    "--no-page", "--no-history"])
    assert res.exit_code == 0, res.output
    assert not (tmp_path / "results").exists()
    assert "history:" not in res.output


def test_rescan_with_one_new_input_adds_only_its_rows(tmp_path):
    h = tmp_path / "results"
    both = pl.concat([rows("TB7", "a.parquet", NIGHT), rows("TB7", "b.parquet", NIGHT)])
    first = append_history(h, both, [("a.parquet", sha("a")), ("b.parquet", sha("b"))])
    assert first.rows_added == 6 and len(first.files_written) == 1  # one file a scan per part and day
    three = pl.concat([both, rows("TB7", "c.parquet", NIGHT)])
    again = append_history(h, three, [("a.parquet", sha("a")), ("b.parquet", sha("b")), ("c.parquet", sha("c"))])
    assert again.rows_added == 3 and set(again.inputs_already_present) == {sha("a"), sha("b")}
    df = read_history(h, part="TB7")
    assert df.height == 9
    assert df.group_by("input_sha256").len().get_column("len").to_list() == [3, 3, 3]
    # rows without a checksum (an input the scan could not hash) are not stored
    assert append_history(h, rows("TB7", "d.parquet", NIGHT), [("d.parquet", None)]).rows_added == 0


def test_page_is_written_with_and_without_history(tmp_path):
    logs = tmp_path / "logs"
    logs.mkdir()
    for f in sorted((REPO / "sample_logs" / "cell3").glob("*.parquet"))[:12]:
        shutil.copy(f, logs / f.name)
    r = CliRunner()
    plain = r.invoke(main, ["scan", str(logs), "--config", str(REPO / "config"), "--out", str(tmp_path / "a"),
                            "--no-history"])
    assert plain.exit_code == 0, plain.output
    assert "Drift forecast" not in (tmp_path / "a" / "summary.html").read_text()
    hist = r.invoke(main, ["scan", str(logs), "--config", str(REPO / "config"), "--out", str(tmp_path / "b"),
                           "--history", str(tmp_path / "h")])
    assert hist.exit_code == 0, hist.output
    page = (tmp_path / "b" / "summary.html").read_text()
    # 12 worn-tip parts: a falling penetration trend on each seam, one sentence each on the page
    assert page.count("at the present drift") == 3 and "Drift forecast" in page


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=200, deadline=None)
@given(st.text(min_size=0, max_size=40))
def test_any_part_name_maps_inside_the_history(name):
    # property: whatever the part name (separators, dots, NUL, unicode), the partition folder is
    # a direct child of the history root with the part= prefix
    from monitor.history import partition_dir

    root = Path("/tmp/ctwd-history-root")
    d = partition_dir(root, name, date(2026, 11, 30))
    assert d.parent.parent == root and d.parent.name.startswith("part=")
    assert "/" not in d.parent.name and d.parent.name not in ("part=.", "part=..")
