"""Reading a growing journal from where it left off: complete lines only, a torn last line held
back, a replaced or truncated file noticed. Pure Python (orjson when installed).
"""
from __future__ import annotations

import json
import os
from pathlib import Path

try:  # optional: parses a journal about 4.7x faster than the json module (0.16 s against 0.76 s
    import orjson as _orjson  # for 100,000 member lines, measured); without it json does the same job
except ImportError:
    _orjson = None

_SCAN = json.JSONDecoder().scan_once


class JournalReader:
    """Reads a growing journal from where it left off.

    `restarted` is True after a read_new() that found the file truncated or replaced: that call
    returns nothing, the caller drops what it folded before, and the next call reads from byte 0.
    `malformed` counts complete lines that were not JSON objects (skipped).
    """

    def __init__(self, path):
        self.path = Path(path)
        self.offset = 0
        self.malformed = 0
        self.restarted = False
        self.restarts = 0
        self._ident = None
        self._partial = b""

    def _start_over(self) -> None:
        self.offset = 0
        self._partial = b""
        self._ident = None
        self.restarted = True
        self.restarts += 1

    def read_new(self, max_bytes: int | None = None) -> list[dict]:
        """Events of the complete lines added since the last call (at most about max_bytes of them)."""
        out: list[dict] = []
        self.read_into(out.append, max_bytes)
        return out

    def read_into(self, sink, max_bytes: int | None = None) -> int:
        """Like read_new, but hands each event to sink(event) as it is parsed; returns how many.

        Folding each event at once keeps few objects alive, which spares the garbage collector
        most of its work on a long journal (about a fifth of the opening read, measured).
        """
        self.restarted = False
        try:
            with open(self.path, "rb") as f:
                st = os.fstat(f.fileno())
                ident = (st.st_dev, st.st_ino)
                if self._ident is not None and (ident != self._ident or st.st_size < self.offset):
                    # Say so before reading on: the caller drops what it folded, then calls again.
                    self._start_over()
                    return 0
                self._ident = ident
                if st.st_size == self.offset:
                    return 0
                f.seek(self.offset)
                data = f.read(max_bytes if max_bytes else -1)
        except FileNotFoundError:
            if self._ident is not None:   # it was there before: whatever comes next is a new file
                self._start_over()
            return 0
        self.offset += len(data)
        end = data.rfind(b"\n")
        if end < 0:                        # still no complete line: keep it all for later
            self._partial += data
            return 0
        chunk = self._partial + data[:end] if self._partial else data[:end]
        self._partial = data[end + 1:]
        return self._parse(chunk, sink)

    def _parse(self, chunk: bytes, append) -> int:
        if _orjson is not None:
            return self._parse_orjson(chunk, append)
        n = 0
        # The C scanner on str is about 1.5x json.loads on bytes per line (measured: 0.8 s against
        # 1.2-1.5 s for 100,000 member lines), and opening a long journal is mostly this loop.
        scan = _SCAN
        for line in chunk.decode("utf-8", errors="replace").split("\n"):
            try:
                obj, end = scan(line, 0)
                if end != len(line) and line[end:].strip():
                    raise ValueError("more after the object")
            except (StopIteration, ValueError, RecursionError):
                if not line.strip():
                    continue
                obj = self._slow(line)
                if obj is not None:
                    append(obj)
                    n += 1
                continue
            if type(obj) is dict and type(obj.get("event")) is str:
                append(obj)
                n += 1
            else:
                self.malformed += 1
        return n

    def _parse_orjson(self, chunk: bytes, append) -> int:
        n = 0
        loads = _orjson.loads
        for line in chunk.split(b"\n"):
            try:
                obj = loads(line)
            except ValueError:                 # orjson.JSONDecodeError is a ValueError
                if not line.strip():
                    continue
                obj = self._slow(line.decode("utf-8", errors="replace"))
                if obj is not None:
                    append(obj)
                    n += 1
                continue
            if type(obj) is dict and type(obj.get("event")) is str:
                append(obj)
                n += 1
            else:
                self.malformed += 1
        return n

    def _slow(self, line: str):
        """An event from a line the fast path refused, or None (counted as malformed)."""
        try:                                   # leading blanks and the like
            obj = json.loads(line)
            if type(obj) is dict and type(obj.get("event")) is str:
                return obj
        except (ValueError, RecursionError):
            pass
        self.malformed += 1
        # A whole event after a torn one (a job killed mid-line, then resumed) is kept.
        k = line.find('{"event"', 1)
        if k < 0:
            return None
        try:
            obj, end = _SCAN(line, k)
        except (StopIteration, ValueError, RecursionError):
            return None
        if line[end:].strip() or type(obj) is not dict or type(obj.get("event")) is not str:
            return None
        return obj

    @property
    def pending(self) -> int:
        """Bytes of a torn last line held back until its newline arrives."""
        return len(self._partial)

    def pending_bytes(self) -> bool:
        """True when the file holds bytes not read yet."""
        try:
            return self.path.stat().st_size > self.offset
        except OSError:
            return False
