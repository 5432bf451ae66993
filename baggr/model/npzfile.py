"""Safe .npz reading and atomic writing: a damaged or hostile file gives a ModelFileError, never a crash.

Written files are ordinary .npz archives (numpy.load reads them). Stored (uncompressed) arrays
start at a multiple of 64 bytes in the file (a padding record in the zip entry's extra field), so
a reader can map them in place: opening a large model then costs neither a copy nor memory the
system cannot take back. Compressed arrays are read and inflated.

A mapped file that is cut short (truncated, or rewritten in place) while it is mapped would make
the next access to a page past its new end fault (SIGBUS): the reader checks every entry's size
against the file's before mapping, and reads files under MAP_FILE_BYTES into memory instead of
mapping them, so only large files carry that risk, and only if something changes them in place
while they are open (baggr itself only ever replaces a model file by renaming a new one over it,
which leaves an open mapping intact).
"""
from __future__ import annotations

import json
import mmap
import os
import struct
import zipfile
import zlib

import numpy as np

from baggr.atomic import replace_atomic
from baggr.errors import ModelFileError

ALLOWED_KINDS = "biuf"     # bool, ints, unsigned ints, floats: never objects
MAX_HEADER = 16 << 20
ALIGN = 64
MAP_BYTES = 1 << 20        # arrays this large or larger are mapped, not read ...
MAP_FILE_BYTES = 64 << 20  # ... in files this large or larger (smaller files are read whole)
_PAD_ID = 0x6262           # the zip extra-field record that pads an entry's header (readers skip unknown ids)
_CRC_CHUNK = 1 << 24


def _entry(f, zf: zipfile.ZipFile, name: str, a: np.ndarray, compress: bool) -> None:
    a = np.ascontiguousarray(a)
    info = zipfile.ZipInfo(name + ".npy", date_time=(1980, 1, 1, 0, 0, 0))
    info.compress_type = zipfile.ZIP_DEFLATED if compress else zipfile.ZIP_STORED
    info.external_attr = 0o644 << 16
    big = a.nbytes > (1 << 31)
    if not compress:
        # the local header: 30 bytes, the name, the extra field, and 20 bytes of sizes when zip64
        head = 30 + len(info.filename.encode("ascii")) + (20 if big else 0)
        pad = (-(f.tell() + head + 4)) % ALIGN
        info.extra = struct.pack("<HH", _PAD_ID, pad) + b"\0" * pad
    with zf.open(info, "w", force_zip64=big) as out:
        np.lib.format.write_array(out, a, allow_pickle=False)


def write_atomic(path, arrays: dict, header: dict, *, compress: bool = False) -> None:
    """Write arrays plus a JSON header to path via a temp file, fsync and rename (never a torn file).
    compress: deflate every array (smaller on disk; a reader must then inflate, it cannot map)."""
    blob = np.frombuffer(json.dumps(header, allow_nan=False).encode(), dtype=np.uint8)

    def write(f):
        with zipfile.ZipFile(f, "w", allowZip64=True) as zf:
            _entry(f, zf, "header", blob, compress)
            for name, a in arrays.items():
                _entry(f, zf, name, a, compress)
    replace_atomic(path, write, suffix=".npz")


def append(path, arrays: dict, header: dict, *, end: int) -> int:
    """Append arrays and a new header to the archive held by the first `end` bytes of path (a new
    file when end is 0), fsync, and return the file's new length: a complete archive again.

    The new central directory lists every earlier entry but the old header, and comes after the
    new entries; the old header and central directory stay behind as dead bytes (a few hundred a
    step). So a step killed half way leaves the archive of the step before intact in the first
    `end` bytes: the caller records the length each step returns, durably, and passes it back.
    """
    blob = np.frombuffer(json.dumps(header, allow_nan=False).encode(), dtype=np.uint8)
    with open(path, "r+b" if end else "wb") as f:
        infos = []
        if end:
            if os.fstat(f.fileno()).st_size < end:
                raise ModelFileError(f"{path} is shorter than its last complete step ({end} bytes): it was cut")
            f.truncate(end)
            try:
                with zipfile.ZipFile(f) as old:
                    infos = [i for i in old.infolist() if i.filename != "header.npy"]
            except (zipfile.BadZipFile, OSError, ValueError, EOFError, NotImplementedError) as e:
                raise ModelFileError(f"{path} is damaged ({type(e).__name__}: {e})") from None
        f.seek(end)
        zf = zipfile.ZipFile(f, "w", allowZip64=True)
        for info in infos:
            zf.filelist.append(info)
            zf.NameToInfo[info.filename] = info
        for name, a in arrays.items():
            _entry(f, zf, name, a, False)
        _entry(f, zf, "header", blob, False)
        zf.close()
        f.flush()
        os.fsync(f.fileno())
        return f.tell()


def read(path, what: str = "model file", *, map_arrays: bool = True) -> tuple[dict, dict]:
    """(header, arrays) of an .npz written by write_atomic; every array's header is checked before
    reading. map_arrays: large stored arrays are mapped from the file (copy on write) after their
    checksum is checked, rather than read."""
    path = os.fspath(path)
    if not os.path.exists(path):
        raise ModelFileError(f"{what} not found: {path}")
    try:
        zf = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError, ValueError, EOFError, NotImplementedError) as e:
        raise ModelFileError(f"{path} is not a readable {what} (truncated or not a baggr file: {e})") from None
    arrays = {}
    try:
        with zf, open(path, "rb") as raw:
            size = os.fstat(raw.fileno()).st_size
            map_arrays = map_arrays and size >= MAP_FILE_BYTES
            for info in zf.infolist():
                name = info.filename
                if not name.endswith(".npy") or "/" in name or name[:-4] in arrays:
                    raise ModelFileError(f"{path}: unexpected member {name!r} in {what}")
                arrays[name[:-4]] = _read_member(zf, raw, size, info, path, map_arrays)
    except ModelFileError:
        raise
    except (zipfile.BadZipFile, OSError, ValueError, EOFError, KeyError, MemoryError, RuntimeError,
            NotImplementedError, OverflowError, struct.error, zlib.error, TypeError, SyntaxError) as e:
        raise ModelFileError(f"{path} is damaged ({type(e).__name__}: {e})") from None
    blob = arrays.pop("header", None)
    if blob is None or blob.dtype != np.uint8 or blob.ndim != 1:
        raise ModelFileError(f"{path} has no baggr header; it is not a {what}")
    try:
        header = json.loads(blob.tobytes().decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError, RecursionError) as e:
        raise ModelFileError(f"{path}: the header is damaged ({e})") from None
    if not isinstance(header, dict):
        raise ModelFileError(f"{path}: the header is not a JSON object")
    return header, arrays


def _array_header(f, info, path):
    """(shape, fortran, dtype) of an .npy stream, refused unless it is a plain numeric array."""
    version = np.lib.format.read_magic(f)
    if version == (1, 0):
        shape, fortran, dtype = np.lib.format.read_array_header_1_0(f, max_header_size=MAX_HEADER)
    elif version in ((2, 0), (3, 0)):
        shape, fortran, dtype = np.lib.format.read_array_header_2_0(f, max_header_size=MAX_HEADER)
    else:
        raise ModelFileError(f"{path}: array format {version} is not supported")
    if dtype.kind not in ALLOWED_KINDS or dtype.hasobject or dtype.fields is not None or dtype.subdtype is not None:
        raise ModelFileError(f"{path}: array {info.filename!r} has type {dtype}, which a baggr file never holds")
    if any(not isinstance(d, int) or d < 0 for d in shape):
        raise ModelFileError(f"{path}: array {info.filename!r} has a bad shape {shape}")
    return shape, fortran, dtype


def _read_member(zf: zipfile.ZipFile, raw, size: int, info: zipfile.ZipInfo, path: str, map_arrays: bool):
    with zf.open(info) as f:
        shape, fortran, dtype = _array_header(f, info, path)
        count = int(np.prod(shape, dtype=object)) if len(shape) else 1
        nbytes = count * dtype.itemsize
        if nbytes > info.file_size:
            raise ModelFileError(f"{path}: array {info.filename!r} claims more data than the file holds")
        if map_arrays and info.compress_type == zipfile.ZIP_STORED and nbytes >= MAP_BYTES:
            mapped = _map(raw, size, info, f.tell(), nbytes, path)
            if mapped is not None:
                a = np.frombuffer(mapped, dtype=dtype, count=count)
                return _shaped(a, shape, fortran, dtype)
        raw_bytes = f.read(nbytes)
        if len(raw_bytes) != nbytes:
            raise ModelFileError(f"{path}: array {info.filename!r} is truncated")
        if f.read(1):
            raise ModelFileError(f"{path}: array {info.filename!r} holds more bytes than its shape")
    a = np.frombuffer(bytearray(raw_bytes), dtype=dtype)
    return _shaped(a, shape, fortran, dtype)


def _shaped(a, shape, fortran, dtype):
    a = a.reshape(shape, order="F" if fortran else "C")
    if dtype.byteorder not in ("=", "|") and dtype.newbyteorder("=") != dtype:
        return np.ascontiguousarray(a.astype(dtype.newbyteorder("=")))
    return np.ascontiguousarray(a)


def _map(raw, size, info, header_len, nbytes, path):
    """The bytes of a stored entry's array, mapped copy-on-write, after checking the entry's CRC;
    None where the entry cannot be mapped aligned (then it is read)."""
    raw.seek(info.header_offset)
    local = raw.read(30)
    if len(local) != 30 or local[:4] != b"PK\x03\x04":
        raise ModelFileError(f"{path}: the entry {info.filename!r} has a damaged header")
    n_name, n_extra = struct.unpack("<HH", local[26:30])
    start = info.header_offset + 30 + n_name + n_extra
    data = start + header_len
    if start + info.file_size > size or data + nbytes > size:
        raise ModelFileError(f"{path}: array {info.filename!r} is truncated")
    if info.file_size != header_len + nbytes:
        raise ModelFileError(f"{path}: array {info.filename!r} holds more bytes than its shape")
    if data % ALIGN:
        return None
    page = mmap.ALLOCATIONGRANULARITY
    base = (start // page) * page
    m = mmap.mmap(raw.fileno(), start + info.file_size - base, access=mmap.ACCESS_COPY, offset=base)
    view = memoryview(m)
    crc = 0
    for i in range(start - base, start - base + info.file_size, _CRC_CHUNK):
        crc = zlib.crc32(view[i:min(i + _CRC_CHUNK, start - base + info.file_size)], crc)
    if crc != info.CRC:
        raise ModelFileError(f"{path}: array {info.filename!r} fails its checksum (the file is damaged)")
    return view[data - base:data - base + nbytes]
