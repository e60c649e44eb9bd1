"""Seeded fuzz cases for whole run files: odd names and damaged contents, for ``check`` and the
daemon (issue "Nothing stops the watch": random bytes, control characters, very long names,
leading dashes; random bytes, truncations, bit flips, bombs).

Every content is derived from a file known to parse (tests/data's open example files, or the
synthetic template) by one kind of damage, so the damage is the only thing that differs; a
serial number in each file keeps every content distinct, so no case is a same-content copy of
another (those are reported as duplicates by design, a different path).
"""

from __future__ import annotations

import gzip
import itertools
import os
import random
from dataclasses import dataclass
from typing import TYPE_CHECKING

from tests.helpers.badfiles import EXAMPLE, MGF, MZXML, PLAIN, TINY, laughs, reindexed

if TYPE_CHECKING:
    from pathlib import Path

# Linux: a name is at most 255 bytes (NAME_MAX); "/" and NUL are the only bytes it cannot hold.
NAME_MAX = 255
SUFFIXES = (b".mzML", b".mzml", b".mzXML", b".mgf", b".MGF", b".mzML.gz")
_NAME_KINDS = ("random-bytes", "control-chars", "long", "leading-dash", "latin1", "spaces")
_CONTENT_KINDS = (
    "valid",
    "random-bytes",
    "truncated",
    "bit-flips",
    "gzip-bomb",
    "entity-bomb",
    "deep-nesting",
    "empty",
    "wrong-format",
)


@dataclass(frozen=True)
class Case:
    """One fuzz file: its name as bytes (written with ``os.fsdecode``), its bytes, and how each
    was made (for the failure message)."""

    name: bytes
    data: bytes
    name_kind: str
    content_kind: str

    @property
    def fs_name(self) -> str:
        return os.fsdecode(self.name)


def _stem(rng: random.Random, kind: str, serial: int) -> bytes:
    tag = b"%03d" % serial  # unique per case, so no two names collide
    if kind == "random-bytes":
        body = bytes(rng.choice([b for b in range(1, 256) if b != 0x2F]) for _ in range(12))
        return tag + body
    if kind == "control-chars":
        ctrl = bytes(rng.choice([*range(1, 32), 127]) for _ in range(6))
        return tag + b"run" + ctrl + b"\nWATCHDOG=trigger\n\x1b[2J"
    if kind == "long":
        return tag + b"L" * (NAME_MAX - len(tag) - 16)
    if kind == "leading-dash":
        return b"--" + tag + b"-c=lab.yaml --record"
    if kind == "latin1":
        return tag + "Probe_\xe9\xff".encode("latin-1")
    return tag + b" QC run  (copy) "


def _damage(rng: random.Random, kind: str, serial: int, suffix: bytes) -> bytes:
    base = _template(rng, suffix)
    mark = b"<!-- fuzz %d -->" % serial
    if kind == "valid":
        data = _marked(base, mark)
    elif kind == "random-bytes":
        data = rng.randbytes(rng.randint(1, 64 * 1024))
    elif kind == "truncated":
        marked = _marked(base, mark)
        data = marked[: rng.randint(1, len(marked) - 1)]
    elif kind == "bit-flips":
        buf = bytearray(_marked(base, mark))
        for _ in range(rng.randint(1, 40)):
            at = rng.randrange(len(buf))
            buf[at] ^= 1 << rng.randrange(8)
        data = bytes(buf)
    elif kind == "gzip-bomb":
        # 1 MiB members of spaces back to back: about 1 kB on disk per MiB inflated.
        head = b'<?xml version="1.0"?>\n<mzML xmlns="http://psi.hupo.org/ms/mzml">' + mark
        member = gzip.compress(b" " * (1 << 20), mtime=0)
        return gzip.compress(head, mtime=0) + member * 400  # always gzip, whatever the name
    elif kind == "entity-bomb":
        decl, _, rest = _marked(base, mark).partition(b"?>")
        data = decl + b"?>" + laughs(b"mzML") + rest.replace(b"<run ", b"<run note='&l9;' ", 1)
    elif kind == "deep-nesting":
        data = b'<?xml version="1.0"?>' + mark + b"<mzML>" + b"<a>" * 200_000 + b"</a>" * 200_000
    elif kind == "empty":
        return b""
    else:  # wrong-format: a PNG signature and some bytes under a run file's name
        data = b"\x89PNG\r\n\x1a\n" + mark + rng.randbytes(256)
    return gzip.compress(data, mtime=0) if suffix == b".mzML.gz" else data


def _template(rng: random.Random, suffix: bytes) -> bytes:
    if suffix.lower() == b".mzxml":
        return MZXML.read_bytes()
    if suffix.lower() == b".mgf":
        return MGF.read_bytes()
    return rng.choice((TINY, EXAMPLE, PLAIN)).read_bytes()


def _marked(data: bytes, mark: bytes) -> bytes:
    """``data`` with ``mark`` where the format allows a comment, so its bytes are unique."""
    if data.startswith(b"<?xml"):
        head, _, rest = data.partition(b"?>")
        marked = head + b"?>" + mark + rest
        # The comment moves every byte after it: an indexed mzML gets its offsets recomputed.
        return reindexed(marked) if b"<indexList" in marked else marked
    return b"#" + mark + b"\n" + data  # MGF: '#' starts a comment line


def cases(seed: int, n: int) -> list[Case]:
    """``n`` cases from ``seed``: every pairing of a name kind with a content kind comes round
    once in a shuffled order (all of them when ``n`` >= 54), the damage drawn from the seed."""
    rng = random.Random(seed)
    pairs = list(itertools.product(_NAME_KINDS, _CONTENT_KINDS))
    rng.shuffle(pairs)
    out = []
    for serial in range(n):
        name_kind, content_kind = pairs[serial % len(pairs)]
        suffix = rng.choice(SUFFIXES)
        if content_kind == "gzip-bomb":
            suffix = b".mzML.gz"
        stem = _stem(rng, name_kind, serial)[: NAME_MAX - len(suffix)]
        out.append(
            Case(stem + suffix, _damage(rng, content_kind, serial, suffix), name_kind, content_kind)
        )
    return out


def write_cases(folder: Path, items: list[Case]) -> list[Path]:
    """Write each case into ``folder`` (staged beside it and renamed in, as a copy tool would,
    so the daemon never sees a half-written fuzz file) and return the paths."""
    staging = folder.parent / (folder.name + ".staging")
    staging.mkdir(exist_ok=True)
    paths = []
    for case in items:
        staged = staging / case.fs_name
        staged.write_bytes(case.data)
        target = folder / case.fs_name
        staged.rename(target)
        paths.append(target)
    return paths
