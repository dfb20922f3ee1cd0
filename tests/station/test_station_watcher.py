"""Which files the station takes, and the choice between native events and polling."""
from __future__ import annotations

from pathlib import Path

from processing.station.config import DEFAULT_EXCLUDE
from processing.station.watcher import FileFilter, filesystem_type, needs_polling


def test_temporary_and_partial_files_are_ignored(tmp_path: Path) -> None:
    rules = FileFilter(tmp_path, ("*",), DEFAULT_EXCLUDE)
    for name in (".hidden.csv", "~lock.csv", "scan.csv.tmp", "scan.part", "x.crdownload", ".x.swp",
                 "scan.csv~", "scan.partial"):
        assert not rules.accepts(tmp_path / name), name
    for name in ("scan.csv", "run 12.jdx", "sample.dx"):
        assert rules.accepts(tmp_path / name), name
    assert not rules.accepts(tmp_path.parent / "elsewhere.csv")


def test_include_exclude_and_recursion(tmp_path: Path) -> None:
    rules = FileFilter(tmp_path, ("*.csv", "*.jdx"), DEFAULT_EXCLUDE + ("blank*",))
    assert rules.accepts(tmp_path / "a.csv") and rules.accepts(tmp_path / "b.jdx")
    assert not rules.accepts(tmp_path / "c.txt") and not rules.accepts(tmp_path / "blank1.csv")
    assert not rules.accepts(tmp_path / "sub" / "a.csv")  # not recursive
    deep = FileFilter(tmp_path, ("*.csv",), DEFAULT_EXCLUDE, recursive=True)
    assert deep.accepts(tmp_path / "sub" / "a.csv")
    assert not deep.accepts(tmp_path / ".cache" / "a.csv")
    (tmp_path / "sub").mkdir()
    (tmp_path / ".cache").mkdir()
    for name in ("a.csv", "sub/b.csv", ".cache/c.csv", "d.tmp", "sub/e.txt"):
        (tmp_path / name).write_text("1,2\n")
    assert sorted(Path(p).relative_to(tmp_path).as_posix() for p, _ in deep.scan()) == ["a.csv", "sub/b.csv"]
    assert [Path(p).name for p, _ in rules.scan()] == ["a.csv"]


def test_local_folder_uses_native_events_and_network_types_poll(tmp_path: Path, monkeypatch) -> None:
    assert filesystem_type("/") != ""
    mounts = tmp_path / "mounts"
    mounts.write_text(
        "rootfs / ext4 rw 0 0\n"
        "server:/export /mnt/lab nfs4 rw 0 0\n"
        "//nas/share /mnt/nas cifs rw 0 0\n"
        "user@host:/x /mnt/ssh fuse.sshfs rw 0 0\n"
        "tmpfs /mnt/lab/local tmpfs rw 0 0\n"
    )
    import builtins

    real_open = builtins.open

    def fake_open(file, *args, **kwargs):  # type: ignore[no-untyped-def]
        return real_open(mounts if file == "/proc/mounts" else file, *args, **kwargs)

    monkeypatch.setattr(builtins, "open", fake_open)
    monkeypatch.setattr("os.path.realpath", lambda p: str(p))
    assert filesystem_type("/mnt/lab/spectra") == "nfs4" and needs_polling("/mnt/lab/spectra")
    assert needs_polling("/mnt/nas/ftir") and needs_polling("/mnt/ssh/x")
    assert filesystem_type("/mnt/lab/local/x") == "tmpfs" and not needs_polling("/mnt/lab/local/x")
    assert filesystem_type("/mnt/labx") == "ext4" and not needs_polling("/home/ana")
