"""Byte-counting, hashing, buffered output shared by the synthetic file writers."""

from __future__ import annotations

import base64
import gzip
import hashlib
import zlib
from typing import TYPE_CHECKING, BinaryIO

import numpy as np
import numpy.typing as npt

if TYPE_CHECKING:
    from pathlib import Path
    from types import TracebackType

_FLUSH_BYTES = 1 << 20


class CountingWriter:
    """Writes text to a file (optionally gzip), counting bytes and hashing them with SHA-1.

    Offsets and the hash refer to the uncompressed bytes, as indexedmzML and mzXML define them.
    Output is buffered in ~1 MiB chunks so memory stays flat however large the file grows.
    """

    def __init__(self, path: Path, *, gz: bool = False) -> None:
        self._raw: BinaryIO | gzip.GzipFile = (
            gzip.open(path, "wb", compresslevel=6) if gz else open(path, "wb")  # noqa: SIM115
        )
        self._sha1 = hashlib.sha1(usedforsecurity=False)
        self._parts: list[bytes] = []
        self._pending = 0
        self.offset = 0

    def write(self, text: str) -> None:
        data = text.encode("utf-8")
        self._parts.append(data)
        self._pending += len(data)
        self.offset += len(data)
        if self._pending >= _FLUSH_BYTES:
            self._flush()

    def _flush(self) -> None:
        if self._parts:
            chunk = b"".join(self._parts)
            self._sha1.update(chunk)
            self._raw.write(chunk)
            self._parts.clear()
            self._pending = 0

    def hexdigest(self) -> str:
        """SHA-1 of every byte written so far."""
        self._flush()
        return self._sha1.hexdigest()

    def close(self) -> None:
        self._flush()
        self._raw.close()

    def __enter__(self) -> CountingWriter:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()


def encode_array(values: npt.NDArray[np.float64], dtype: str, *, compress: bool) -> str:
    """Base64 text of ``values`` as little- or big-endian floats (``dtype`` like '<f8', '>f4')."""
    raw = np.ascontiguousarray(values, dtype=np.dtype(dtype)).tobytes()
    if compress:
        raw = zlib.compress(raw, 6)
    return base64.b64encode(raw).decode("ascii")


def fmt(value: float) -> str:
    """A float as text that round-trips exactly (repr), for header values."""
    return repr(float(value))
