"""A strict reader of Universal Binary JSON (UBJSON), the format of XGBoost's ``.ubj`` files.

XGBoost's own reader trusts the file: damaged bytes can crash the whole process. This reader
checks every length against the bytes that remain and every nesting level against a limit,
so a damaged file is a :class:`ValueError` here, before XGBoost ever sees it. The model it
gives is then checked like a JSON model (``xgboost_models.forest_from_xgboost_json``).

Format: https://ubjson.org (draft 12): a value is a one-byte marker, then its payload; numbers
are big-endian; an array or object may give its element type (``$``) and count (``#``); an
object's keys are strings without their ``S`` marker. Values come back as ``json.loads``
gives them (lists, dicts, numbers, text), so both forms of a model read alike.
"""

from __future__ import annotations

import numpy as np

MAX_NESTING = 64  # XGBoost's model is about 8 levels deep
_NUMBERS = {b"i": ">i1", b"U": ">u1", b"I": ">i2", b"l": ">i4", b"L": ">i8", b"d": ">f4",
            b"D": ">f8"}
_CONSTANTS = {b"Z": None, b"T": True, b"F": False}


def read_ubjson(raw: bytes):
    """The value that ``raw`` holds; ValueError (saying where) when it is not exactly one
    well-formed UBJSON value."""
    reader = _Reader(memoryview(raw))
    value = reader.value(reader.marker(), 0)
    if reader.pos != len(raw):
        raise ValueError(f"{len(raw) - reader.pos} bytes after the end of the model, at byte "
                         f"{reader.pos}")
    return value


class _Reader:
    def __init__(self, raw: memoryview) -> None:
        self.raw = raw
        self.pos = 0

    def take(self, n: int) -> memoryview:
        if n < 0 or self.pos + n > len(self.raw):
            raise ValueError(f"the file ends inside a value (byte {self.pos}, {n} more needed)")
        out = self.raw[self.pos:self.pos + n]
        self.pos += n
        return out

    def marker(self) -> bytes:
        m = bytes(self.take(1))
        while m == b"N":  # no-op
            m = bytes(self.take(1))
        return m

    def number(self, m: bytes):
        dtype = np.dtype(_NUMBERS[m])
        v = np.frombuffer(self.take(dtype.itemsize), dtype=dtype)[0]
        return float(v) if dtype.kind == "f" else int(v)

    def count(self) -> int:
        m = self.marker()
        if m not in _NUMBERS or m in (b"d", b"D"):
            raise ValueError(f"a length at byte {self.pos - 1} is not a whole number")
        n = self.number(m)
        if n < 0 or n > len(self.raw) - self.pos + 1:
            raise ValueError(f"a length of {n} at byte {self.pos} is beyond the file's end")
        return n

    def text(self) -> str:
        try:
            return str(self.take(self.count()), "utf-8")
        except UnicodeDecodeError:
            raise ValueError(f"a string before byte {self.pos} is not UTF-8") from None

    def value(self, m: bytes, level: int):
        if level > MAX_NESTING:
            raise ValueError(f"values nested more than {MAX_NESTING} deep at byte {self.pos}")
        if m in _CONSTANTS:
            return _CONSTANTS[m]
        if m in _NUMBERS:
            return self.number(m)
        if m == b"C":
            return chr(self.take(1)[0])
        if m in (b"S", b"H"):
            return self.text()
        if m == b"[":
            return self.array(level)
        if m == b"{":
            return self.object(level)
        raise ValueError(f"unknown marker {m!r} at byte {self.pos - 1}")

    def container(self) -> tuple[bytes | None, int | None]:
        """An optimised container's element type and count (None when not given)."""
        kind = count = None
        if bytes(self.raw[self.pos:self.pos + 1]) == b"$":
            self.pos += 1
            kind = bytes(self.take(1))
            if bytes(self.take(1)) != b"#":
                raise ValueError(f"a typed container at byte {self.pos - 1} gives no count")
            count = self.count()
        elif bytes(self.raw[self.pos:self.pos + 1]) == b"#":
            self.pos += 1
            count = self.count()
        return kind, count

    def array(self, level: int):
        kind, count = self.container()
        if kind in _NUMBERS:
            dtype = np.dtype(_NUMBERS[kind])
            return np.frombuffer(self.take(count * dtype.itemsize), dtype=dtype).tolist()
        out = []
        if count is not None:
            for _ in range(count):
                out.append(self.value(kind or self.marker(), level + 1))
            return out
        while (m := self.marker()) != b"]":
            out.append(self.value(m, level + 1))
        return out

    def object(self, level: int) -> dict:
        kind, count = self.container()
        out = {}
        if count is not None:
            for _ in range(count):
                key = self.text()
                out[key] = self.value(kind or self.marker(), level + 1)
            return out
        while True:
            if bytes(self.raw[self.pos:self.pos + 1]) == b"}":
                self.pos += 1
                return out
            key = self.text()
            out[key] = self.value(self.marker(), level + 1)
