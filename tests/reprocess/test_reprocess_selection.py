"""Which files a reprocess takes: folders, globs, files, and ledger queries, streamed."""
from __future__ import annotations

import os
from pathlib import Path

import pytest

from processing.reprocess import selection
from processing.reprocess.selection import LedgerSelection, PathSelection, SelectionError, parse_query
from processing.station import ledger
from processing.station.config import DEFAULT_EXCLUDE


def _touch(path: Path, text: str = "x\n") -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


def _names(paths: PathSelection) -> list[str]:
    return sorted(Path(c.path).name for c in paths.candidates())


def test_folders_are_walked_with_subfolders_and_the_station_exclusions(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    for name in ("2023/jan/a.jdx", "2023/feb/b.csv", "c.jdx", "2023/.hidden/d.jdx", "e.tmp", ".f.jdx", "2024/g.part"):
        _touch(root / name)
    chosen = PathSelection((str(root),), exclude=DEFAULT_EXCLUDE)
    assert _names(chosen) == ["a.jdx", "b.csv", "c.jdx"]
    assert chosen.count() == 3
    found = {c.path: c for c in chosen.candidates()}
    real = str((root / "2023/jan/a.jdx").resolve())
    assert real in found and found[real].size_bytes == 2 and found[real].mtime_ns == os.stat(real).st_mtime_ns
    only_jdx = PathSelection((str(root),), include=("*.jdx",), exclude=DEFAULT_EXCLUDE)
    assert _names(only_jdx) == ["a.jdx", "c.jdx"]


def test_globs_match_folders_at_any_depth_and_names_in_them(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    for name in ("ftir-1/2023/a.jdx", "ftir-1/2023/b.csv", "ftir-2/2024/c.jdx", "ftir-2/d.jdx", "e.jdx"):
        _touch(root / name)
    assert _names(PathSelection((f"{root}/**/*.jdx",))) == ["a.jdx", "c.jdx", "d.jdx", "e.jdx"]
    assert _names(PathSelection((f"{root}/ftir-*/2023/*",))) == ["a.jdx", "b.csv"]
    assert _names(PathSelection((f"{root}/ftir-2/**",))) == ["c.jdx", "d.jdx"]
    assert _names(PathSelection((f"{root}/nothing-*/*.jdx",))) == []


def test_a_file_keeps_its_own_name_in_a_resolved_folder_and_a_missing_one_is_refused(tmp_path: Path) -> None:
    real = _touch(tmp_path / "real" / "a.csv")
    (tmp_path / "alias").symlink_to(tmp_path / "real")
    (tmp_path / "real" / "link.csv").symlink_to(real)
    found = list(PathSelection((str(tmp_path / "alias" / "link.csv"),)).candidates())
    assert [c.path for c in found] == [str((tmp_path / "real").resolve() / "link.csv")]
    with pytest.raises(SelectionError, match="no-such.csv: no such file or folder"):
        PathSelection((str(tmp_path / "no-such.csv"),)).check()


def test_a_huge_folder_is_read_one_entry_at_a_time(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The walk never lists a folder: the first file comes before the folder has been read to
    its end (os.scandir is consumed lazily)."""
    root = tmp_path / "big"
    for index in range(50):
        _touch(root / f"f{index:03d}.csv")
    taken: list[int] = []
    real_scandir = os.scandir

    class Counting:
        def __init__(self, path: object) -> None:
            self.inner = real_scandir(path)  # type: ignore[arg-type]

        def __enter__(self) -> Counting:
            return self

        def __exit__(self, *exc: object) -> None:
            self.inner.close()

        def __iter__(self) -> Counting:
            return self

        def __next__(self) -> os.DirEntry[str]:
            entry = next(self.inner)
            taken.append(1)
            return entry

    monkeypatch.setattr(selection.FileFilter.scan.__globals__["os"], "scandir", Counting)
    first = next(iter(PathSelection((str(root),)).candidates()))
    assert first.path.endswith(".csv") and len(taken) == 1


def test_ledger_queries_parse_into_conditions_and_refuse_what_they_cannot_mean() -> None:
    query = parse_query("from=2024-01-01, to=2024-06-30 verdict=fail|warn status=processed path=/data/ftir-2/* species=HCl")
    assert query.received_from == "2024-01-01" and query.received_before == "2024-07-01"  # `to` includes its day
    assert query.verdicts == ("fail", "warn") and query.statuses == ("processed",)
    assert query.path_glob == "/data/ftir-2/*"
    assert set(query.species) == {"H35Cl", "H37Cl"}  # the molecule's isotopologues, as runs record them
    assert parse_query("all") == ledger.RunQuery()
    assert parse_query("from=2024-03-01T08:30+01:00").received_from == "2024-03-01T07:30:00.000Z"
    for bad, says in (
        ("", "empty query"), ("verdict=maybe", "not one of"), ("colour=red", "KEY=VALUE"),
        ("from=yesterday", "not a date"), ("verdict=fail verdict=warn", "given twice"), ("species=XeF", "species"),
    ):
        with pytest.raises(SelectionError, match=says):
            parse_query(bad)


def test_ledger_selection_pages_through_the_newest_versions_that_match(
    ledger_at: str | Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
) -> None:
    """On both backends: runs are keyed by instrument + path, so the same file name on two
    instruments is two candidates, each with its instrument, and a page boundary between them
    loses neither; a name that is not UTF-8 is paged once and matched by a folder glob."""
    archive = tmp_path / "archive"
    odd = os.fsdecode(bytes(archive) + b"/r\xe9sum\xe9.csv")  # Latin-1 bytes: not UTF-8
    conn = ledger.open_ledger(ledger_at)
    try:
        for index in range(7):
            verdict = "fail" if index % 2 else "pass"
            ledger.record_run(conn, str(archive / f"r{index}.csv"), f"sha{index}", "processed", verdict=verdict,
                              species=("H35Cl",), received_at=f"2024-0{1 + index}-15T10:00:00.000Z", instrument="ftir-a")
        # a newer version decides what the file is now: r0 fails now
        ledger.record_run(conn, str(archive / "r0.csv"), "sha0", "processed", verdict="fail",
                          received_at="2024-01-15T10:00:00.000Z", instrument="ftir-a")
        ledger.record_run(conn, str(tmp_path / "elsewhere.csv"), "x", "unreadable", error="test", instrument="ftir-a")
        ledger.record_run(conn, odd, "y", "processed", verdict="fail", received_at="2024-02-01T00:00:00.000Z",
                          instrument="ftir-a")
        ledger.record_run(conn, str(archive / "r1.csv"), "other", "processed", verdict="fail", species=("D35Cl",),
                          received_at="2024-02-15T10:00:00.000Z", instrument="ftir-b")
        monkeypatch.setattr(selection, "LEDGER_PAGE", 1)  # every candidate ends a page
        failing = LedgerSelection(parse_query("verdict=fail"))
        found = [(c.instrument, Path(c.path).name) for c in failing.candidates(conn)]
        assert found == [("ftir-a", "r0.csv"), ("ftir-a", "r1.csv"), ("ftir-a", "r3.csv"), ("ftir-a", "r5.csv"),
                         ("ftir-a", Path(odd).name), ("ftir-b", "r1.csv")]
        assert failing.count(conn) == 6
        monkeypatch.setattr(selection, "LEDGER_PAGE", 2)
        spring = LedgerSelection(parse_query(f"from=2024-03-01 to=2024-05-31 path={archive}/*"))
        assert [Path(c.path).name for c in spring.candidates(conn)] == ["r2.csv", "r3.csv", "r4.csv"]
        assert all(c.size_bytes is None for c in spring.candidates(conn))  # not on disk: the analysis says so
        # the glob on both backends: `*` crosses folders, `?` is one character, [..] one of a set
        assert LedgerSelection(parse_query(f"path={archive}/*")).count(conn) == 9
        assert LedgerSelection(parse_query(f"path={tmp_path}*")).count(conn) == 10
        assert LedgerSelection(parse_query(f"path={archive}/r?.csv")).count(conn) == 8
        assert LedgerSelection(parse_query(f"path={archive}/r[13].csv")).count(conn) == 3
        assert LedgerSelection(parse_query(f"path={archive}/r[^13].csv")).count(conn) == 5
        assert LedgerSelection(parse_query(f"path={archive}/R?.csv")).count(conn) == 0  # case kept
        assert LedgerSelection(parse_query(f"path={archive}/r.*")).count(conn) == 0  # a dot is a dot
        assert LedgerSelection(parse_query("species=HCl")).count(conn) == 6  # r0's newest version found none
        assert LedgerSelection(parse_query("species=DCl")).count(conn) == 1
        assert LedgerSelection(parse_query("all")).count(conn) == 10
        only_b = LedgerSelection(parse_query("instrument=ftir-b"))
        assert [(c.instrument, c.path) for c in only_b.candidates(conn)] == [("ftir-b", str(archive / "r1.csv"))]
        assert LedgerSelection(parse_query("instrument=ftir-c")).count(conn) == 0
    finally:
        conn.close()
