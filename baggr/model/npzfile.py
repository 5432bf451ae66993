"""Safe .npz reading and atomic writing: a damaged or hostile file gives a ModelFileError, never a crash."""
from __future__ import annotations

import json
import os
import zipfile

import numpy as np

from baggr.atomic import replace_atomic
from baggr.errors import ModelFileError

ALLOWED_KINDS = "biuf"     # bool, ints, unsigned ints, floats: never objects
MAX_HEADER = 16 << 20


def write_atomic(path, arrays: dict, header: dict) -> None:
    """Write arrays plus a JSON header to path via a temp file, fsync and rename (never a torn file)."""
    blob = np.frombuffer(json.dumps(header, allow_nan=False).encode(), dtype=np.uint8)
    replace_atomic(path, lambda f: np.savez(f, header=blob, **arrays), suffix=".npz")


def read(path, what: str = "model file") -> tuple[dict, dict]:
    """(header, arrays) of an .npz written by write_atomic; every array's header is checked before reading."""
    path = os.fspath(path)
    if not os.path.exists(path):
        raise ModelFileError(f"{what} not found: {path}")
    try:
        zf = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError, ValueError, EOFError) as e:
        raise ModelFileError(f"{path} is not a readable {what} (truncated or not a baggr file: {e})") from None
    arrays = {}
    try:
        with zf:
            for info in zf.infolist():
                name = info.filename
                if not name.endswith(".npy") or "/" in name:
                    raise ModelFileError(f"{path}: unexpected member {name!r} in {what}")
                arrays[name[:-4]] = _read_member(zf, info, path)
    except ModelFileError:
        raise
    except (zipfile.BadZipFile, OSError, ValueError, EOFError, KeyError, MemoryError, RuntimeError) as e:
        raise ModelFileError(f"{path} is damaged ({type(e).__name__}: {e})") from None
    blob = arrays.pop("header", None)
    if blob is None or blob.dtype != np.uint8 or blob.ndim != 1:
        raise ModelFileError(f"{path} has no baggr header; it is not a {what}")
    try:
        header = json.loads(blob.tobytes().decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as e:
        raise ModelFileError(f"{path}: the header is damaged ({e})") from None
    if not isinstance(header, dict):
        raise ModelFileError(f"{path}: the header is not a JSON object")
    return header, arrays


def _read_member(zf: zipfile.ZipFile, info: zipfile.ZipInfo, path: str) -> np.ndarray:
    with zf.open(info) as f:
        version = np.lib.format.read_magic(f)
        if version == (1, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_1_0(f, max_header_size=MAX_HEADER)
        elif version in ((2, 0), (3, 0)):
            shape, fortran, dtype = np.lib.format.read_array_header_2_0(f, max_header_size=MAX_HEADER)
        else:
            raise ModelFileError(f"{path}: array format {version} is not supported")
        if dtype.kind not in ALLOWED_KINDS or dtype.hasobject:
            raise ModelFileError(f"{path}: array {info.filename!r} has type {dtype}, which a baggr file never holds")
        count = int(np.prod(shape, dtype=np.int64)) if len(shape) else 1
        nbytes = count * dtype.itemsize
        if count < 0 or nbytes > info.file_size:
            raise ModelFileError(f"{path}: array {info.filename!r} claims more data than the file holds")
        raw = f.read(nbytes)
        if len(raw) != nbytes:
            raise ModelFileError(f"{path}: array {info.filename!r} is truncated")
    a = np.frombuffer(bytearray(raw), dtype=dtype).reshape(shape, order="F" if fortran else "C")
    return np.ascontiguousarray(a.astype(dtype.newbyteorder("="), copy=False))
