"""Copy a workbook package (zip archive) part by part, changing only the parts given.

Every part that is not replaced is copied as its compressed bytes, untouched: same data,
same compression method, same time stamp and attributes, same order. A replaced part keeps
its place and its entry's metadata and is compressed with its original method; added
parts come last, deflated. The archive must have passed
:func:`xlbridge.book.safety.check_archive` (no encryption, sizes within limits).

The zip format is written here (local headers, central directory, end record) because
Python's zipfile offers no public way to copy an entry without recompressing it, and
recompressing a large data sheet would cost more than reading it.
"""

from __future__ import annotations

import struct
import time
import zipfile
import zlib
from collections.abc import Collection, Mapping, Sequence
from pathlib import Path
from typing import BinaryIO

from xlbridge.book.safety import BookError

__all__ = ["copy_package"]

_LOCAL = struct.Struct("<4s5H3L2H")  # signature .. extra length: 30 bytes
_CENTRAL = struct.Struct("<4s6H3L5H2L")  # 46 bytes
_END = struct.Struct("<4s4H2LH")  # 22 bytes
_LIMIT = 0xFFFFFFFF  # beyond this a zip needs ZIP64 records, which this writer does not make
_ZIP64_EXTRA = 0x0001
_DATA_DESCRIPTOR = 0x08
_CHUNK = 1 << 20


def _dos_time(date_time: tuple[int, ...]) -> tuple[int, int]:
    y, mo, d, h, mi, s = date_time[:6]
    return (h << 11) | (mi << 5) | (s // 2), (max(y, 1980) - 1980) << 9 | (mo << 5) | d


def _without_zip64(extra: bytes) -> bytes:
    """The extra field minus ZIP64 records (sizes are written in the ordinary fields)."""
    out, i = bytearray(), 0
    while i + 4 <= len(extra):
        kind, size = struct.unpack_from("<2H", extra, i)
        if kind != _ZIP64_EXTRA:
            out += extra[i : i + 4 + size]
        i += 4 + size
    return bytes(out)


def _name_bytes(info: zipfile.ZipInfo) -> bytes:
    if info.flag_bits & 0x800:
        return info.orig_filename.encode("utf-8")
    try:
        return info.orig_filename.encode("cp437")
    except UnicodeEncodeError:
        info.flag_bits |= 0x800
        return info.orig_filename.encode("utf-8")


def _compress(data: bytes, method: int) -> bytes:
    if method == zipfile.ZIP_STORED:
        return data
    co = zlib.compressobj(6, zlib.DEFLATED, -15)
    return co.compress(data) + co.flush()


class _Writer:
    def __init__(self, fh: BinaryIO) -> None:
        self.fh = fh
        self.central: list[bytes] = []
        self.offset = 0

    def _write(self, data: bytes) -> None:
        self.fh.write(data)
        self.offset += len(data)

    def entry(self, info: zipfile.ZipInfo, crc: int, csize: int, usize: int,
              chunks: Sequence[bytes] | None = None, copy_from: tuple[BinaryIO, int] | None = None
              ) -> None:
        if max(csize, usize, self.offset) >= _LIMIT:
            raise BookError(f"part {info.filename} is too large for this copy writer "
                            "(4 GiB); refused")
        name = _name_bytes(info)
        flags = info.flag_bits & ~_DATA_DESCRIPTOR  # sizes are known: no trailing descriptor
        extra = _without_zip64(info.extra)
        dtime, ddate = _dos_time(info.date_time)
        header_at = self.offset
        self._write(_LOCAL.pack(b"PK\x03\x04", info.extract_version, flags,
                                info.compress_type, dtime, ddate, crc, csize, usize,
                                len(name), len(extra)) + name + extra)
        if copy_from is not None:
            src, start = copy_from
            src.seek(start)
            left = csize
            while left:
                block = src.read(min(left, _CHUNK))
                if not block:
                    raise BookError(f"part {info.filename} ends early in the input archive")
                self._write(block)
                left -= len(block)
        else:
            for c in chunks or ():
                self._write(c)
        comment = info.comment or b""
        self.central.append(_CENTRAL.pack(
            b"PK\x01\x02", (info.create_system << 8) | info.create_version,
            info.extract_version, flags, info.compress_type, dtime, ddate, crc, csize, usize,
            len(name), len(extra), len(comment), 0, info.internal_attr, info.external_attr,
            header_at) + name + extra + comment)

    def finish(self, comment: bytes) -> None:
        start = self.offset
        for rec in self.central:
            self._write(rec)
        if len(self.central) > 0xFFFF or self.offset >= _LIMIT:
            raise BookError("the copy would need a ZIP64 archive; refused")
        self._write(_END.pack(b"PK\x05\x06", 0, 0, len(self.central), len(self.central),
                              self.offset - start, start, len(comment)) + comment)


def _data_start(src: BinaryIO, info: zipfile.ZipInfo) -> int:
    src.seek(info.header_offset)
    head = src.read(_LOCAL.size)
    if len(head) != _LOCAL.size or head[:4] != b"PK\x03\x04":
        raise BookError(f"part {info.filename} has a damaged entry in the input archive")
    fields = _LOCAL.unpack(head)
    return info.header_offset + _LOCAL.size + fields[-2] + fields[-1]


def copy_package(src: Path, dest: Path, replaced: Mapping[str, bytes],
                 added: Sequence[tuple[str, bytes]] = (), removed: Collection[str] = ()
                 ) -> None:
    """Write ``dest``: the archive ``src`` with the parts ``replaced`` (name -> new bytes)
    changed, ``removed`` left out and ``added`` (name, bytes) appended; every other part is
    copied as it is stored. Checks the result by reading the written parts back."""
    with zipfile.ZipFile(src) as zf, open(src, "rb") as raw, open(dest, "wb") as out:
        infos = zf.infolist()
        names = {i.filename for i in infos}
        missing = (set(replaced) | set(removed)) - names
        if missing:
            raise BookError(f"{src.name} has no part {sorted(missing)[0]}")
        clash = [n for n, _ in added if n in names]
        if clash:
            raise BookError(f"{src.name} already has a part {clash[0]}")
        w = _Writer(out)
        for info in infos:
            if info.filename in removed:
                continue
            data = replaced.get(info.filename)
            if data is None:
                w.entry(info, info.CRC, info.compress_size, info.file_size,
                        copy_from=(raw, _data_start(raw, info)))
                continue
            if info.compress_type not in (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED):
                info.compress_type = zipfile.ZIP_DEFLATED
            body = _compress(data, info.compress_type)
            w.entry(info, zlib.crc32(data), len(body), len(data), chunks=[body])
        for name, data in added:
            info = zipfile.ZipInfo(name, time.localtime()[:6])
            info.compress_type = zipfile.ZIP_DEFLATED
            info.create_system = 0  # as the spreadsheet program writes its parts
            info.extract_version = info.create_version = 20
            body = _compress(data, info.compress_type)
            w.entry(info, zlib.crc32(data), len(body), len(data), chunks=[body])
        w.finish(zf.comment)
    _check_written(dest, {**replaced, **dict(added)},
                   [i.filename for i in infos if i.filename not in removed]
                   + [n for n, _ in added])


def _check_written(dest: Path, written: Mapping[str, bytes], names: list[str]) -> None:
    try:
        with zipfile.ZipFile(dest) as zf:
            if zf.namelist() != names:
                raise BookError(f"the copy {dest.name} does not list the parts it should")
            for name, data in written.items():
                if zf.read(name) != data:  # zipfile also checks the CRC
                    raise BookError(f"part {name} of the copy {dest.name} reads back wrong")
    except (zipfile.BadZipFile, OSError) as exc:
        raise BookError(f"the copy {dest.name} cannot be read back: {exc}") from None
