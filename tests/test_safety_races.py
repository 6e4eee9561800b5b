"""Publishing outputs: no existing path is ever replaced without force, even one that appears
while the output is being written; temporary files never stay behind; modes follow the umask.

Races are staged with deterministic hooks (a wrapper around the publishing step, or a write
callback that starts a second writer), never with timing. POSIX rules used as the reference:
open(2) creates a file with mode 0o666 & ~umask; link(2) and open(O_CREAT|O_EXCL) fail with
EEXIST on any existing name, a symbolic link to a missing file included.
"""

from __future__ import annotations

import errno
import os
import shutil
import stat
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import pytest

from xlbridge.book import BookError, safety
from xlbridge.book.safety import (
    STALE_TEMP_SECONDS,
    TEMP_PREFIX,
    check_output,
    remove_stale_temps,
    write_atomically,
)

from .bookfactory import REPO, cost_book, run

posix_only = pytest.mark.skipif(os.name != "posix", reason="POSIX modes and symbolic links")
APPEARED = "appeared while this run was writing it"
D = "'Site data'"


def _temps(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith(TEMP_PREFIX))


def _text(text: str) -> Callable[[Path], None]:
    return lambda p: p.write_text(text)


def _hook_publish(monkeypatch, before: Callable[[], None]) -> list[Path]:
    """Run ``before`` just ahead of the real publishing step; returns the temporary files
    seen there (the file is fully written by then)."""
    real = safety.publish
    seen: list[Path] = []

    def publish(tmp: Path, out: Path, *, force: bool) -> None:
        seen.append(tmp)
        before()
        real(tmp, out, force=force)

    monkeypatch.setattr(safety, "publish", publish)
    return seen


@pytest.fixture(params=["hard link", "no hard links"])
def links(request, monkeypatch) -> str:
    """Every race is run twice: with hard links, and on a filesystem without them."""
    if request.param == "no hard links":
        def no_link(src, dst, *args, **kwargs):
            raise OSError(errno.EPERM, "Operation not permitted")

        monkeypatch.setattr(os, "link", no_link)
    return request.param


# --- a file appears between the check and the publishing step ---------------------------------


def test_file_appearing_before_publish_is_kept(tmp_path: Path, monkeypatch, links) -> None:
    out = tmp_path / "result.csv"
    seen = _hook_publish(monkeypatch, lambda: out.write_text("theirs"))
    with pytest.raises(BookError, match=APPEARED) as info:
        write_atomically(out, _text("ours"), force=False)
    assert "--force" in str(info.value) and "another file" in str(info.value)
    assert out.read_text() == "theirs"
    assert len(seen) == 1 and not seen[0].exists() and _temps(tmp_path) == []


@posix_only
def test_dangling_link_appearing_before_publish_is_kept(tmp_path: Path, monkeypatch,
                                                        links) -> None:
    out, target = tmp_path / "result.csv", tmp_path / "elsewhere.csv"
    _hook_publish(monkeypatch, lambda: out.symlink_to(target))
    with pytest.raises(BookError, match=APPEARED):
        write_atomically(out, _text("ours"), force=False)
    assert out.is_symlink() and os.readlink(out) == str(target)
    assert not target.exists() and _temps(tmp_path) == []


def test_folder_appearing_before_publish_is_kept(tmp_path: Path, monkeypatch, links) -> None:
    out = tmp_path / "result.csv"
    _hook_publish(monkeypatch, lambda: out.mkdir())
    with pytest.raises(BookError, match=APPEARED):
        write_atomically(out, _text("ours"), force=False)
    assert out.is_dir() and list(out.iterdir()) == [] and _temps(tmp_path) == []


def test_force_replaces_what_appeared(tmp_path: Path, monkeypatch, links) -> None:
    out = tmp_path / "result.csv"
    _hook_publish(monkeypatch, lambda: out.write_text("theirs"))
    write_atomically(out, _text("ours"), force=True)
    assert out.read_text() == "ours" and _temps(tmp_path) == []


# --- two writers to one new path ------------------------------------------------------------------


@pytest.mark.parametrize("where", ["during the write", "at the publishing step"])
def test_two_writers_to_one_new_path_exactly_one_wins(tmp_path: Path, monkeypatch, links,
                                                      where: str) -> None:
    """The first writer passes its checks; the second starts, finishes and publishes while
    the first is still writing (or about to publish). The second keeps the file; the first
    gets the message; nothing is overwritten."""
    out = tmp_path / "result.csv"
    second = []

    def run_second() -> None:
        if not second:
            second.append(True)
            write_atomically(out, _text("second"), force=False)

    if where == "at the publishing step":
        _hook_publish(monkeypatch, run_second)
        first_write = _text("first")
    else:
        def first_write(tmp: Path) -> None:
            tmp.write_text("first")
            run_second()

    with pytest.raises(BookError, match=APPEARED):
        write_atomically(out, first_write, force=False)
    assert out.read_text() == "second"
    assert _temps(tmp_path) == []  # the second run did not take the first one's file away


def test_existing_path_refused_before_any_work(tmp_path: Path) -> None:
    out = tmp_path / "result.csv"
    out.write_text("theirs")
    calls = []
    with pytest.raises(BookError, match="already exists; add --force"):
        write_atomically(out, calls.append, force=False)
    assert calls == [] and out.read_text() == "theirs"


@posix_only
def test_dangling_link_counts_as_existing(tmp_path: Path) -> None:
    out, target = tmp_path / "result.csv", tmp_path / "missing.csv"
    out.symlink_to(target)
    with pytest.raises(BookError, match="link to a missing file; add --force"):
        check_output(out, force=False)
    with pytest.raises(BookError, match="link to a missing file"):
        write_atomically(out, _text("ours"), force=False)
    assert os.readlink(out) == str(target) and not target.exists()
    write_atomically(out, _text("ours"), force=True)  # --force replaces the link itself
    assert not out.is_symlink() and out.read_text() == "ours" and not target.exists()


@posix_only
def test_force_replaces_a_link_not_the_file_it_points_to(tmp_path: Path) -> None:
    target, out = tmp_path / "keep.csv", tmp_path / "result.csv"
    target.write_text("keep")
    out.symlink_to(target)
    with pytest.raises(BookError, match="already exists; add --force"):
        write_atomically(out, _text("ours"), force=False)
    write_atomically(out, _text("ours"), force=True)
    assert not out.is_symlink() and out.read_text() == "ours" and target.read_text() == "keep"


# --- no hard links: the reservation path cleans up after itself -----------------------------------


def test_failed_rename_after_reservation_leaves_nothing(tmp_path: Path, monkeypatch) -> None:
    def no_link(src, dst, *args, **kwargs):
        raise OSError(errno.EOPNOTSUPP, "Operation not supported")

    def broken_replace(src, dst, *args, **kwargs):
        raise OSError(errno.EIO, "Input/output error")

    monkeypatch.setattr(os, "link", no_link)
    monkeypatch.setattr(os, "replace", broken_replace)
    out = tmp_path / "result.csv"
    with pytest.raises(BookError, match="Input/output error"):
        write_atomically(out, _text("ours"), force=False)
    assert list(tmp_path.iterdir()) == []  # neither the placeholder nor the temporary file


# --- temporary files ------------------------------------------------------------------------------


def test_temporary_file_is_named_and_lives_beside_the_output(tmp_path: Path) -> None:
    out = tmp_path / ("long name " * 30 + ".xlsx")  # 305 characters: too long to extend
    out = out.with_name(out.name[-250:])
    names = []

    def write(tmp: Path) -> None:
        names.append(tmp.name)
        tmp.write_text("x")

    write_atomically(out, write, force=False)
    (name,) = names
    assert name.startswith(TEMP_PREFIX) and f"-{os.getpid()}-" in name
    assert name.endswith(".xlsx") and len(name.encode()) < 255
    assert out.read_text() == "x" and _temps(tmp_path) == []


@pytest.mark.parametrize("error", [RuntimeError("writer bug"), KeyboardInterrupt(),
                                   OSError(errno.ENOSPC, "No space left on device")])
def test_failure_mid_write_leaves_no_temporary_file(tmp_path: Path, error) -> None:
    out = tmp_path / "result.csv"

    def write(tmp: Path) -> None:
        tmp.write_text("half")
        raise error

    expected = BookError if isinstance(error, OSError) else type(error)
    with pytest.raises(expected):
        write_atomically(out, write, force=False)
    assert list(tmp_path.iterdir()) == []


KILLED_RUN = """
import os, sys
from pathlib import Path
from xlbridge.book.safety import write_atomically

def die(tmp):
    tmp.write_text("half")
    os._exit(9)  # killed mid-write: no clean-up code runs

write_atomically(Path(sys.argv[1]), die, force=False)
"""


def _killed_run(out: Path) -> Path:
    """A separate process dies while writing ``out``; returns the temporary file it left."""
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    with subprocess.Popen([sys.executable, "-c", KILLED_RUN, str(out)], env=env,
                          stderr=subprocess.PIPE, text=True) as proc:
        _, err = proc.communicate(timeout=120)
    assert proc.returncode == 9, err
    (left,) = [p for p in out.parent.iterdir() if p.name.startswith(TEMP_PREFIX)]
    assert f"-{proc.pid}-" in left.name and not out.exists()
    return left


@posix_only
def test_next_run_removes_temporary_file_of_a_killed_run(tmp_path: Path) -> None:
    left = _killed_run(tmp_path / "result.csv")
    assert left.read_text() == "half"
    write_atomically(tmp_path / "other.csv", _text("ok"), force=False)
    assert not left.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["other.csv"]


def test_stale_rules(tmp_path: Path) -> None:
    """Running process on this machine: kept. Another machine's (or a reused pid): kept while
    written to recently, removed after STALE_TEMP_SECONDS. Not ours: never touched."""
    left = _killed_run(tmp_path / "result.csv")
    host = left.name[len(TEMP_PREFIX):].split("-")[0]
    other = f"{int(host[0], 16) ^ 1:x}{host[1:]}"
    rest = "-".join(left.name[len(TEMP_PREFIX):].split("-")[2:])

    def ours(host_tag: str, pid: int) -> Path:
        p = tmp_path / f"{TEMP_PREFIX}{host_tag}-{pid}-{rest}"
        p.write_text("x")
        return p

    live_here = ours(host, os.getpid())
    elsewhere = ours(other, os.getpid())
    old_elsewhere = ours(other, os.getpid() + 1)
    old_live_here = tmp_path / f"{TEMP_PREFIX}{host}-{os.getpid()}-00000000-old.csv"
    old_live_here.write_text("x")
    hours_ago = os.stat(live_here).st_mtime - 2 * STALE_TEMP_SECONDS
    for p in (old_elsewhere, old_live_here):
        os.utime(p, (hours_ago, hours_ago))
    foreign = [tmp_path / ".xlbridge-notes.txt", tmp_path / f"{TEMP_PREFIX}by-hand.txt"]
    for p in foreign:
        p.write_text("keep")
        os.utime(p, (hours_ago, hours_ago))
    removed = remove_stale_temps(tmp_path)
    gone = {left, old_elsewhere, old_live_here} if os.name == "posix" else {
        old_elsewhere, old_live_here}
    assert set(removed) == gone
    assert all(not p.exists() for p in gone)
    assert live_here.exists() and elsewhere.exists() and all(p.exists() for p in foreign)


@posix_only
def test_links_named_like_temporary_files_are_not_followed_or_removed(tmp_path: Path) -> None:
    victim = tmp_path / "keep" / "data.csv"
    victim.parent.mkdir()
    victim.write_text("keep")
    link = tmp_path / f"{TEMP_PREFIX}000000-1-00000000-x.csv"
    link.symlink_to(victim)
    os.utime(link, (1, 1), follow_symlinks=False)
    assert remove_stale_temps(tmp_path) == []
    assert link.is_symlink() and victim.read_text() == "keep"


# --- modes ----------------------------------------------------------------------------------------


@posix_only
@pytest.mark.parametrize("umask", [0o022, 0o077, 0o002])
def test_new_file_mode_follows_umask(tmp_path: Path, umask: int) -> None:
    out = tmp_path / "result.csv"
    old = os.umask(umask)
    try:
        write_atomically(out, _text("x"), force=False)
    finally:
        os.umask(old)
    assert stat.S_IMODE(out.stat().st_mode) == 0o666 & ~umask


@posix_only
@pytest.mark.parametrize(("mode", "expected"), [(0o640, 0o640), (0o604, 0o604),
                                                (0o444, 0o644), (0o755, 0o755)])
def test_copy_gets_the_mode_of_its_input(tmp_path: Path, mode: int, expected: int) -> None:
    """The input's permission bits; the owner can always read and replace the copy."""
    src, out = tmp_path / "in.xlsx", tmp_path / "copy.xlsx"
    src.write_text("x")
    os.chmod(src, mode)
    old = os.umask(0o077)
    try:
        write_atomically(out, _text("y"), force=False, inputs=[src], mode_from=src)
    finally:
        os.umask(old)
    assert stat.S_IMODE(out.stat().st_mode) == expected


@posix_only
def test_workbook_copy_from_the_command_gets_the_input_mode(tmp_path: Path, capsys) -> None:
    book = cost_book(tmp_path / "costs.xlsx")
    os.chmod(book, 0o640)
    out = tmp_path / "copy.xlsx"
    code, _, err = run(["fit", book, "--y", f"{D}!B:B", "--x", f"{D}!A:A", "--model", "2",
                        "--format", "xlsx", "--out", out], capsys)
    assert code == 0, err
    assert stat.S_IMODE(out.stat().st_mode) == 0o640
    assert _temps(tmp_path) == []


# --- end to end through the installed command -----------------------------------------------------


def _command() -> list[str]:
    script = shutil.which("xlbridge", path=str(Path(sys.executable).parent))
    if script:
        return [script]
    return [sys.executable, "-c", "import sys; from xlbridge.cli import main; sys.exit(main())"]


@posix_only
def test_command_refuses_dangling_link_at_out(tmp_path: Path) -> None:
    book = cost_book(tmp_path / "costs.xlsx")
    out, target = tmp_path / "result.csv", tmp_path / "missing.csv"
    out.symlink_to(target)
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    argv = [*_command(), "fit", str(book), "--y", f"{D}!B:B", "--x", f"{D}!A:A",
            "--model", "2", "--format", "csv", "--out", str(out)]
    proc = subprocess.run(argv, env=env, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2, proc.stderr
    assert proc.stderr.startswith("xlbridge:") and "link to a missing file" in proc.stderr
    assert "Traceback" not in proc.stderr
    assert out.is_symlink() and os.readlink(out) == str(target) and not target.exists()
    assert _temps(tmp_path) == []
