"""Guards around workbook files: hostile archives, atomic output, formula-looking text.

Nothing here imports openpyxl at import time: the checks run before any parser sees the
file, and :func:`safe_openpyxl` imports it only so that it parses XML with defusedxml.
"""

from __future__ import annotations

import contextlib
import os
import stat
import tempfile
import zipfile
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

__all__ = [
    "MAX_ENTRIES",
    "MAX_ENTRY_RATIO",
    "MAX_UNZIPPED_BYTES",
    "BookError",
    "check_archive",
    "check_output",
    "formula_safe_text",
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


class BookError(Exception):
    """Bad input or output file or reference: exit code 2; message says what to fix."""


def _size_text(n: int) -> str:
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB"):
        if n < 1024 or unit == "TiB":
            return f"{n:,} {unit}" if unit == "bytes" else f"{n:,.1f} {unit}"
        n /= 1024  # type: ignore[assignment]
    raise AssertionError  # pragma: no cover


def _xml_prolog_has_dtd(head: bytes) -> bool | None:
    """True if a DOCTYPE comes before the root element, False if not, None if unclear."""
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        text = head.decode("utf-16", errors="replace")
    else:
        text = head.decode("utf-8", errors="replace").lstrip("\ufeff")
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
    return None if len(head) >= _PROLOG_LIMIT else False


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
            verdict = _xml_prolog_has_dtd(head)
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
    """Refuse an output that is an input, exists without --force, is read-only or open."""
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
    if out.exists():
        if not force:
            raise BookError(f"{out} already exists; add --force to replace it")
        mode = out.stat().st_mode
        if not (mode & stat.S_IWUSR) or not os.access(out, os.W_OK):
            raise BookError(f"{out} is read-only; make it writable or write to another file")


def write_atomically(
    out: Path, write: Callable[[Path], None], *, force: bool, inputs: Iterable[Path] = ()
) -> None:
    """Write to a temporary file beside ``out`` with ``write(tmp)``, then rename it into place.

    A failure at any point leaves ``out`` as it was (absent or the old file).
    """
    inputs = list(inputs)
    check_output(out, force=force, inputs=inputs)
    try:
        fd, tmp_name = tempfile.mkstemp(
            dir=out.parent, prefix=".xlbridge-", suffix=out.suffix + ".tmp"
        )
    except OSError as exc:
        raise BookError(
            f"cannot write in {out.parent}: {exc.strerror or exc} (is the folder read-only?)"
        ) from None
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        write(tmp)
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, out)
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
