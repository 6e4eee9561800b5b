"""Guards around workbook files: hostile archives, safe output, formula-looking text.

Nothing here imports openpyxl at import time: the checks run before any parser sees the
file, and :func:`safe_openpyxl` imports it only so that it parses XML with defusedxml.
"""

from __future__ import annotations

import codecs
import contextlib
import os
import re
import stat
import time
import zipfile
import zlib
from collections.abc import Callable, Iterable, Iterator
from pathlib import Path
from typing import Any

__all__ = [
    "MAX_BLOCK_CELLS",
    "MAX_ENTRIES",
    "MAX_ENTRY_RATIO",
    "MAX_UNZIPPED_BYTES",
    "STALE_TEMP_SECONDS",
    "TEMP_PREFIX",
    "BookError",
    "check_archive",
    "check_output",
    "formula_safe_text",
    "publish",
    "reader_guard",
    "remove_stale_temps",
    "safe_openpyxl",
    "write_atomically",
]

#: Limits for an .xlsx/.xlsm archive, checked on the central directory before parsing.
#: A real workbook has tens of parts; a 1,000,000-row sheet unzips to well under 1 GiB.
MAX_ENTRIES = 10_000
MAX_UNZIPPED_BYTES = 2 * 1024**3
#: Sheet XML compresses about 5-30x; a part that claims more than this ratio and is also
#: big is a decompression bomb, not a workbook.
MAX_ENTRY_RATIO = 1_000
_RATIO_MIN_BYTES = 50 * 1024**2
#: How much of an XML part is read to find its root element (the DTD must precede it).
_PROLOG_LIMIT = 64 * 1024

_OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
#: The largest block of cells read from one sheet, counted from A1 to the farthest cell the
#: block must hold (rows x columns). The value reader holds the whole block in memory, about
#: 60 bytes a cell with the Python lists (20 million cells: about 1.2 GB).
MAX_BLOCK_CELLS = 20_000_000


class BookError(Exception):
    """Bad input or output file or reference: exit code 2; message says what to fix."""


@contextlib.contextmanager
def reader_guard(book: str, sheet: str | None = None) -> Iterator[None]:
    """Turn any failure inside a reader library (python-calamine, openpyxl, zipfile, the XML
    parsers) into a BookError naming the file and sheet: the one place this is done.

    Native panics of calamine arrive as pyo3's PanicException, which derives from
    BaseException, so everything but interrupts and exits is caught.
    """
    try:
        yield
    except BookError:
        raise
    except (KeyboardInterrupt, SystemExit, GeneratorExit):
        raise
    except BaseException as exc:  # noqa: BLE001 - a message, never a traceback
        where = book + (f", sheet {sheet[:100]!r}," if sheet else "")
        if isinstance(exc, MemoryError):
            raise BookError(f"{where} is too large to read in the memory of this computer; "
                            "split the data over smaller sheets or files") from None
        detail = " ".join(str(exc).split())[:200] or type(exc).__name__
        raise BookError(
            f"{where} cannot be read ({detail}); open the file in a spreadsheet program, "
            "save it again as .xlsx and try again"
        ) from None


def _size_text(n: int) -> str:
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB"):
        if n < 1024 or unit == "TiB":
            return f"{n:,} {unit}" if unit == "bytes" else f"{n:,.1f} {unit}"
        n /= 1024  # type: ignore[assignment]
    raise AssertionError  # pragma: no cover


#: Byte-order marks, longest first (the UTF-32 LE mark begins with the UTF-16 LE one).
_BOMS = (
    (b"\x00\x00\xfe\xff", "utf-32-be"),
    (b"\xff\xfe\x00\x00", "utf-32-le"),
    (b"\xef\xbb\xbf", "utf-8"),
    (b"\xfe\xff", "utf-16-be"),
    (b"\xff\xfe", "utf-16-le"),
)
#: Zero bytes around the first character betray UTF-16/UTF-32 written without a mark
#: (True = a zero byte); the UTF-32 patterns are tried first.
_WIDE_PATTERNS = (
    ((True, True, True, False), "utf-32-be"),
    ((False, True, True, True), "utf-32-le"),
    ((True, False), "utf-16-be"),
    ((False, True), "utf-16-le"),
)
_EBCDIC_START = b"\x4c\x6f\xa7\x94"  # "<?xm" in EBCDIC, which some parsers read
_WIDE_CODECS = frozenset({"utf-16", "utf-16-be", "utf-16-le", "utf-32", "utf-32-be",
                          "utf-32-le"})
#: An XML declaration naming its encoding, matched in ASCII only (so that its length in
#: characters is its length in bytes in every 8-bit reading).
_DECL_CHAR = r"[\t\n\r\x20-\x3d\x40-\x7e]"  # printable ASCII except > and ?
_DECLARATION = re.compile(
    rf"""\A[\t\n\r ]*<\?xml[\t\n\r ]{_DECL_CHAR}*?\bencoding[\t\n\r ]*=[\t\n\r ]*"""
    rf"""(["'])([A-Za-z][A-Za-z0-9._-]{{0,39}})\1{_DECL_CHAR}*\?>""")


class _UnknownEncoding(Exception):
    """A part declares a character encoding that cannot be decoded here."""


def _decoded(data: bytes, codec: str) -> str:
    try:
        return data.decode(codec, errors="replace")
    except (LookupError, UnicodeError, ValueError) as exc:
        raise _UnknownEncoding(codec) from exc


def _xml_readings(head: bytes) -> list[str]:
    """The start of an XML part as each parser may read it.

    A byte-order mark decides; without one, the zero bytes around the first character show
    UTF-16 or UTF-32; otherwise the part is 8-bit (UTF-8, or EBCDIC by its first bytes) and
    the encoding named in the XML declaration applies after the declaration, so that reading
    is checked as well. Raises _UnknownEncoding for a declared encoding Python cannot decode.
    """
    bom, codec = next(((b, c) for b, c in _BOMS if head.startswith(b)), (b"", "utf-8"))
    start = len(bom)
    if not bom:
        zeros = tuple(b == 0 for b in head[:4])
        for pattern, wide in _WIDE_PATTERNS:
            if zeros[: len(pattern)] == pattern:
                codec = wide
                break
        else:
            if head.startswith(_EBCDIC_START):
                codec = "cp037"
    text = _decoded(head[start:], codec)
    if codec in _WIDE_CODECS:
        return [text]  # the width is fixed by now; a declaration cannot change it
    m = _DECLARATION.match(text)
    if m is None:
        return [text]
    try:
        declared = codecs.lookup(m.group(2)).name
    except LookupError:
        raise _UnknownEncoding(m.group(2)) from None
    if declared in (codec, *_WIDE_CODECS):
        return [text]  # parsers keep reading 8-bit text when the declaration says UTF-16
    # The declaration is single-byte text here, so its length in characters is in bytes too.
    return [text, text[: m.end()] + _decoded(head[start + m.end():], declared)]


def _scan_prolog(text: str, complete: bool) -> bool | None:
    """True if a DOCTYPE comes before the root element, False if not, None if unclear."""
    i, n = 0, len(text)
    while i < n:
        if text[i].isspace():
            i += 1
            continue
        if text.startswith("<?", i):
            j = text.find("?>", i)
            if j < 0:
                return None
            i = j + 2
        elif text.startswith("<!--", i):
            j = text.find("-->", i)
            if j < 0:
                return None
            i = j + 3
        elif text.startswith("<!", i):
            return True  # <!DOCTYPE or <!ENTITY: never in a workbook part
        elif text.startswith("<", i):
            return False
        else:
            return False  # not XML (binary part); its parser is not an XML one
    return False if complete else None


def _xml_prolog_has_dtd(head: bytes) -> bool | None:
    """True if any reading of the part has a DTD before its root element, None if unclear."""
    verdicts = [_scan_prolog(t, len(head) < _PROLOG_LIMIT) for t in _xml_readings(head)]
    if any(verdicts):
        return True
    return None if None in verdicts else False


def check_archive(path: Path) -> None:
    """Refuse files that are not workbook archives, zip bombs and XML with a DTD.

    Checks the central directory (entry count, total and per-entry unzipped size) and the
    prolog of every part, so that no parser ever expands an entity or a bomb.
    """
    name = path.name
    try:
        with open(path, "rb") as fh:
            magic = fh.read(8)
    except PermissionError:
        raise BookError(f"cannot read {name}: permission denied (is it locked by another "
                        "program, or not readable for you?)") from None
    except OSError as exc:
        raise BookError(f"cannot read {name}: {exc.strerror or exc}") from None
    if magic.startswith(_OLE_MAGIC):
        raise BookError(
            f"{name} is an old-format (.xls) or password-protected workbook; save it as an "
            ".xlsx or .xlsm workbook without a password and try again"
        )
    if not zipfile.is_zipfile(path):
        if magic.startswith(b"PK"):
            raise BookError(
                f"{name} is a damaged or incomplete workbook archive (was it copied or "
                "downloaded completely?); open it in a spreadsheet program and save it again"
            )
        raise BookError(
            f"{name} is not an .xlsx/.xlsm workbook (it is not a zip archive); if it is a "
            "text file, name it .csv; otherwise open it and save it as .xlsx"
        )
    try:
        zf = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise BookError(f"{name} is a damaged workbook archive: {exc}") from None
    with zf:
        infos = zf.infolist()
        if len(infos) > MAX_ENTRIES:
            raise BookError(
                f"{name} has {len(infos):,} parts inside (limit {MAX_ENTRIES:,}); this is not "
                "an ordinary workbook, refused"
            )
        total = sum(i.file_size for i in infos)
        if total > MAX_UNZIPPED_BYTES:
            raise BookError(
                f"{name} would unzip to {_size_text(total)} (limit "
                f"{_size_text(MAX_UNZIPPED_BYTES)}); refused as a possible zip bomb"
            )
        for info in infos:
            ratio = info.file_size / max(info.compress_size, 1)
            if info.file_size > _RATIO_MIN_BYTES and ratio > MAX_ENTRY_RATIO:
                raise BookError(
                    f"{name}: part {info.filename} would unzip to {_size_text(info.file_size)} "
                    f"from {_size_text(info.compress_size)} ({ratio:,.0f}:1); refused as a "
                    "possible zip bomb"
                )
        names = {i.filename for i in infos}
        if "[Content_Types].xml" not in names:
            raise BookError(
                f"{name} is a zip archive but not a workbook (no [Content_Types].xml); open "
                "it and save it as .xlsx"
            )
        for info in infos:
            if info.is_dir() or info.file_size == 0:
                continue
            if info.flag_bits & 0x1:
                raise BookError(f"{name}: part {info.filename} is encrypted; remove the password")
            try:
                with zf.open(info) as part:
                    head = part.read(_PROLOG_LIMIT)
            except (zipfile.BadZipFile, OSError, NotImplementedError, RuntimeError) as exc:
                raise BookError(f"{name}: part {info.filename} cannot be read: {exc}") from None
            try:
                verdict = _xml_prolog_has_dtd(head)
            except _UnknownEncoding as exc:
                raise BookError(
                    f"{name}: part {info.filename} is in the character encoding "
                    f"{str(exc)!r}, which cannot be checked for entity declarations; refused. "
                    "Open the workbook in a spreadsheet program and save it again"
                ) from None
            if verdict is None or verdict:
                raise BookError(
                    f"{name}: part {info.filename} declares a DTD or entities (an XML attack "
                    "such as an entity bomb); refused. Workbooks saved by spreadsheet "
                    "programs never contain one"
                )


def formula_safe_text(value: object) -> object:
    """Text that would start a formula in a CSV opened by a spreadsheet gets a leading '."""
    if isinstance(value, str) and value[:1] in ("=", "+", "-", "@", "\t", "\r"):
        return "'" + value
    return value


def _lock_file(path: Path) -> Path:
    # The desktop spreadsheet program marks an open workbook with "~$" + name beside it.
    return path.with_name("~$" + path.name)


def check_output(out: Path, *, force: bool, inputs: Iterable[Path] = ()) -> None:
    """Refuse an output that is an input, exists without --force, is read-only or open.

    Anything at ``out`` counts as existing, a symbolic link to a missing file included.
    This is the early, friendly check; ``publish`` enforces the rule again at the last step.
    """
    for src in inputs:
        try:
            same = out.exists() and os.path.samefile(out, src)
        except OSError:
            same = False
        if same or out.resolve() == Path(src).resolve():
            raise BookError(
                f"--out {out.name} is the input file; the runner never modifies its input, "
                "give another file name"
            )
    if not out.parent.exists():
        raise BookError(f"cannot write {out}: folder {out.parent} does not exist")
    if out.is_dir():
        raise BookError(f"cannot write {out}: it is a folder; give a file name")
    if _lock_file(out).exists():
        raise BookError(
            f"{out.name} is open in another program (lock file {_lock_file(out).name} "
            "found); close it there, or write to another file"
        )
    if not os.path.lexists(out):
        return
    dangling = not out.exists()
    if not force:
        if dangling:
            raise BookError(f"{out} already exists as a link to a missing file; add --force "
                            "to replace the link, or write to another file")
        raise BookError(f"{out} already exists; add --force to replace it")
    if dangling:
        return  # --force replaces the link itself; there is no file to be read-only
    mode = out.stat().st_mode
    if not (mode & stat.S_IWUSR) or not os.access(out, os.W_OK):
        raise BookError(f"{out} is read-only; make it writable or write to another file")


# --- temporary files -----------------------------------------------------------------------------

#: Every temporary file we write starts with this, followed by
#: ``<host tag>-<pid>-<random>-<output name>``, so a later run can tell ours from anything else.
TEMP_PREFIX = ".xlbridge-tmp-"
#: A temporary file of ours untouched for this long is left over from a run that died: a save
#: writes continuously and takes seconds to minutes, never an hour without a write.
STALE_TEMP_SECONDS = 3600
_TEMP_NAME = re.compile(re.escape(TEMP_PREFIX) + r"([0-9a-f]{6})-([1-9][0-9]{0,9})-[0-9a-f]{8}-")
_NAME_BYTES = 100  # of the output name kept in a temporary name (file names max. 255 bytes)


def _host_tag() -> str:
    # Process ids mean something only on the machine that issued them; the tag tells whether
    # a temporary file in a shared folder was written here. The host name from uname where
    # there is one (what gethostname gives there, without socket's ~5 ms of start-up).
    if hasattr(os, "uname"):
        host = os.uname().nodename
    else:  # pragma: no cover - Windows
        import socket

        host = socket.gethostname()
    return f"{zlib.crc32(host.encode('utf-8', 'replace')) & 0xFFFFFF:06x}"


def _short_name(name: str) -> str:
    suffix = Path(name).suffix[:16]
    stem = name[: len(name) - len(suffix)] if suffix else name
    while stem and len(os.fsencode(stem + suffix)) > _NAME_BYTES:
        stem = stem[:-1]
    return stem + suffix


def _pid_running(pid: int) -> bool:
    if os.name != "posix":
        return True  # os.kill(pid, 0) would end the process on Windows; the age rule applies
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # running, under another user
    except (OverflowError, OSError):
        return False  # not a process id this system can have
    return True


def remove_stale_temps(folder: Path, *, now: float | None = None) -> list[Path]:
    """Remove our temporary files in ``folder`` left by runs that died; returns them.

    A temporary file is stale when the process that wrote it, on this machine, is no longer
    running, or when it has not been written to for STALE_TEMP_SECONDS (a run on another
    machine sharing the folder, or a process id reused since). Files not named by us, links
    and folders are never touched; a file that cannot be removed is left in peace.
    """
    now = time.time() if now is None else now
    here = _host_tag()
    removed = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        m = _TEMP_NAME.match(entry.name)
        if m is None:
            continue
        try:
            st = entry.stat(follow_symlinks=False)
        except OSError:
            continue
        if not stat.S_ISREG(st.st_mode):
            continue
        dead = m.group(1) == here and not _pid_running(int(m.group(2)))
        if dead or now - st.st_mtime > STALE_TEMP_SECONDS:
            with contextlib.suppress(OSError):
                os.unlink(entry.path)
                removed.append(Path(entry.path))
    return removed


def _new_temp(out: Path) -> Path:
    """Create an empty temporary file beside ``out``, with the mode the umask gives."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0)
    stem = f"{TEMP_PREFIX}{_host_tag()}-{os.getpid()}-"
    for _ in range(100):
        tmp = out.with_name(f"{stem}{os.urandom(4).hex()}-{_short_name(out.name)}")
        try:
            fd = os.open(tmp, flags, 0o666)
        except FileExistsError:
            continue
        except OSError as exc:
            raise BookError(f"cannot write in {out.parent}: {exc.strerror or exc} (is the "
                            "folder read-only?)") from None
        os.close(fd)
        return tmp
    raise BookError(f"cannot create a temporary file in {out.parent}")  # pragma: no cover


# --- publishing ----------------------------------------------------------------------------------


def _appeared(out: Path) -> BookError:
    return BookError(
        f"{out} appeared while this run was writing it (another program or run created it); "
        "it was not replaced. Add --force to replace it, or write to another file"
    )


def publish(tmp: Path, out: Path, *, force: bool) -> None:
    """Put the finished file ``tmp`` at ``out`` in one step; ``tmp`` is gone afterwards.

    With ``force`` an existing ``out`` is replaced atomically. Without it nothing at ``out``
    (a file, a folder, a link, even one to a missing file) is ever replaced: the step that
    creates the name fails if the name is taken, so there is no moment between a check and
    the rename in which another file could appear and be lost. Raises BookError then.
    """
    if force:
        os.replace(tmp, out)
        return
    # A hard link is created only if the name is free (lstat semantics), atomically.
    try:
        os.link(tmp, out)
    except FileExistsError:
        raise _appeared(out) from None
    except OSError:
        _publish_by_reservation(tmp, out)  # no hard links here (FAT, exFAT, some shares)
    else:
        with contextlib.suppress(OSError):
            os.unlink(tmp)


def _publish_by_reservation(tmp: Path, out: Path) -> None:
    # Where hard links are unsupported, the name is reserved by creating it exclusively
    # (O_EXCL also fails on a link to a missing file) and the finished file is renamed over
    # that empty placeholder of ours. Another no-clobber writer cannot take the name; what the
    # rename can replace is only our placeholder, or what a program that overwrites without
    # looking wrote into it in the instant between the two calls. This is portable, unlike a
    # no-replace rename (renameat2 or renamex_np through ctypes, filesystem permitting).
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0)
    try:
        fd = os.open(out, flags, 0o600)
    except FileExistsError:
        raise _appeared(out) from None
    try:
        mine = os.fstat(fd)
    finally:
        os.close(fd)
    try:
        os.replace(tmp, out)
    except BaseException:
        with contextlib.suppress(OSError):
            now = os.lstat(out)
            if (now.st_dev, now.st_ino) == (mine.st_dev, mine.st_ino):
                os.unlink(out)  # our placeholder, never anyone else's file
        raise


def write_atomically(
    out: Path, write: Callable[[Path], None], *, force: bool, inputs: Iterable[Path] = (),
    mode_from: Path | None = None,
) -> None:
    """Write ``out`` through a temporary file beside it: ``write(tmp)`` fills it, ``publish``
    puts it in place.

    Without ``force`` no existing path is replaced, even one that appears during the write.
    A failure at any point leaves ``out`` as it was and no temporary file. The new file gets
    the mode the umask gives, or the permission bits of ``mode_from`` (a copy of an input)
    plus read and write for the owner.
    Stale temporary files of earlier runs in the folder are removed first.
    """
    inputs = list(inputs)
    check_output(out, force=force, inputs=inputs)
    remove_stale_temps(out.parent)
    tmp = _new_temp(out)
    try:
        write(tmp)
        with open(tmp, "r+b") as fh:  # write access: Windows flushes only a writable handle
            os.fsync(fh.fileno())
        if mode_from is not None:
            # The input's permission bits, but always readable and writable by the owner: a
            # copy of a read-only original is a result its user may later replace (--force).
            bits = stat.S_IMODE(os.stat(mode_from).st_mode) & 0o777
            os.chmod(tmp, bits | stat.S_IRUSR | stat.S_IWUSR)
        publish(tmp, out, force=force)
    except PermissionError:
        raise BookError(
            f"cannot replace {out}: permission denied (is it open in another program, "
            "locked or read-only?)"
        ) from None
    except OSError as exc:
        raise BookError(f"cannot write {out}: {exc.strerror or exc}") from None
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()


def safe_openpyxl() -> Any:
    """openpyxl, imported so that it parses XML with defusedxml."""
    # openpyxl parses with defusedxml when it is installed, unless this variable says no;
    # the runner insists (the archive was also checked before openpyxl sees it).
    os.environ["OPENPYXL_DEFUSEDXML"] = "True"
    import openpyxl

    if not getattr(openpyxl, "DEFUSEDXML", False):
        raise BookError("defusedxml is required to read workbooks safely; pip install defusedxml")
    return openpyxl
