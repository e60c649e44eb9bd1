"""Helpers that craft broken and hostile run files in a test's tmp_path from the reference files.

Every file is derived from tests/data/ (mzML examples of HUPO-PSI, pymzML and
pyteomics; the mzXML and MGF files of pyteomics' tests): cut, damaged or wrapped, never invented
from scratch, so the damage is the only thing that differs from a file known to parse.
"""

from __future__ import annotations

import base64
import csv
import gzip
import hashlib
import re
import zlib
from typing import TYPE_CHECKING

from tests.helpers.refdata import REFERENCE as SHARED_REFERENCE

if TYPE_CHECKING:
    from collections.abc import Iterator
    from pathlib import Path

REFERENCE = SHARED_REFERENCE
TINY = REFERENCE / "mzml" / "tiny.pwiz.1.1.mzML"  # indexed, uncompressed, mixed RT units
EXAMPLE = REFERENCE / "mzml" / "example.mzML"  # indexed, zlib arrays
PLAIN = REFERENCE / "mzml" / "adv_mzqc_in_mzml.mzML"  # not indexed
MZXML = REFERENCE / "mzxml" / "test.mzXML"
MGF = REFERENCE / "mgf" / "test.mgf"
SECRET_MARKER = "IONWARDEN-SECRET-7f3a9c"  # noqa: S105 - a marker, not a password


def tsv_rows(name: str) -> list[dict[str, str]]:
    """Rows of a reference TSV, skipping its '#' provenance lines (reference/README.md)."""
    with (REFERENCE / name).open(encoding="utf-8") as fh:
        return list(csv.DictReader((ln for ln in fh if not ln.startswith("#")), delimiter="\t"))


def write(tmp: Path, name: str, data: bytes) -> Path:
    """Write ``data`` to ``tmp/name`` and return the path."""
    path = tmp / name
    path.write_bytes(data)
    return path


def reindexed(data: bytes) -> bytes:
    """Recompute the offset index and SHA-1 of an indexedmzML after its body was edited."""
    body_end = data.index(b"<indexList")
    head = data[:body_end]
    lines = []
    for match in re.finditer(rb"<spectrum\s[^>]*>", head):
        found = re.search(rb'\sid="([^"]*)"', match.group(0))
        assert found is not None
        lines.append(b'      <offset idRef="%s">%d</offset>' % (found.group(1), match.start()))
    index = (
        b'<indexList count="1">\n    <index name="spectrum">\n'
        + b"\n".join(lines)
        + b"\n    </index>\n  </indexList>\n"
    )
    prefix = head + index + b"  <indexListOffset>%d</indexListOffset>\n  <fileChecksum>" % len(head)
    digest = hashlib.sha1(prefix).hexdigest().encode()  # noqa: S324 - mzML's own checksum
    return prefix + digest + b"</fileChecksum>\n</indexedmzML>\n"


def as_indexed(plain: bytes) -> bytes:
    """Wrap a plain mzML in indexedmzML with a correct offset index and SHA-1."""
    decl_end = plain.index(b"?>") + 2
    body = plain[decl_end:].strip()
    wrapped = (
        plain[:decl_end]
        + b'\n<indexedmzML xmlns="http://psi.hupo.org/ms/mzml">\n'
        + body
        + b'\n  <indexList count="1"></indexList>'
    )
    return reindexed(wrapped)


def inline_param_groups(data: bytes) -> bytes:
    """Replace each referenceableParamGroupRef by the group's own cvParam lines."""
    groups = dict(
        re.findall(
            rb'<referenceableParamGroup id="([^"]+)">\s*(.*?)\s*</referenceableParamGroup>',
            data,
            flags=re.S,
        )
    )
    return re.sub(
        rb'<referenceableParamGroupRef ref="([^"]+)"/>', lambda m: groups[m.group(1)], data
    )


def replace_first_binary(data: bytes, new_text: bytes, *, after: int = 0) -> bytes:
    """Swap the text of the first ``<binary>`` element at or after byte ``after``."""
    start = data.index(b"<binary>", after) + len(b"<binary>")
    end = data.index(b"</binary>", start)
    return data[:start] + new_text + data[end:]


def deflated_zeros(n_bytes: int) -> bytes:
    """``n_bytes`` zero bytes zlib-compressed (about 1000:1), built without holding them."""
    deflate = zlib.compressobj(9)
    chunk = bytes(1 << 20)
    parts = [deflate.compress(chunk) for _ in range(n_bytes >> 20)]
    parts.append(deflate.compress(bytes(n_bytes & ((1 << 20) - 1))))
    parts.append(deflate.flush())
    return b"".join(parts)


def with_first_array(data: bytes, raw: bytes, *, declared_length: int | None = None) -> bytes:
    """Put base64(``raw``) in the first ``<binary>`` (and its encodedLength); optionally say
    the first spectrum holds ``declared_length`` values (``defaultArrayLength``)."""
    text = base64.b64encode(raw)
    data = replace_first_binary(data, text)
    data = re.sub(rb'encodedLength="\d+"', b'encodedLength="%d"' % len(text), data, count=1)
    if declared_length is not None:
        length = b'defaultArrayLength="%d"' % declared_length
        data = re.sub(rb'defaultArrayLength="\d+"', length, data, count=1)
    return data


def with_compression(data: bytes, accession: bytes, name: bytes) -> bytes:
    """Relabel every array's compression term (no-compression -> ``accession``)."""
    return data.replace(
        b'accession="MS:1000576" name="no compression"',
        b'accession="' + accession + b'" name="' + name + b'"',
    )


def bad_zlib(example: bytes, *, reindex: bool = True) -> bytes:
    """example.mzML with the first zlib array's bytes damaged, then re-encoded as valid base64.

    ``reindex=False`` keeps the old SHA-1, as a file damaged after writing would.
    """
    start = example.index(b"<binary>") + len(b"<binary>")
    end = example.index(b"</binary>", start)
    raw = bytearray(base64.b64decode(example[start:end]))
    raw[2:12] = b"\xff" * 10  # inside the deflate stream: invalid block header
    damaged = example[:start] + base64.b64encode(bytes(raw)) + example[end:]
    return reindexed(damaged) if reindex else damaged


def gz(data: bytes) -> bytes:
    """gzip ``data`` (mtime fixed so the bytes are reproducible)."""
    return gzip.compress(data, mtime=0)


def zlib_ok(data: bytes) -> bool:
    """True when ``data`` inflates (used to make sure a 'bad zlib' case really is bad)."""
    try:
        zlib.decompress(data)
    except zlib.error:
        return False
    return True


# --- hostile XML (docs/reliability.md item 1) ----------------------------------------------------


def attack_files(tmp: Path) -> Iterator[tuple[str, Path]]:
    """The four entity attacks, each as mzML and as mzXML; the secret file holds the marker."""
    secret = tmp / "secret.txt"
    secret.write_text(SECRET_MARKER, encoding="utf-8")
    dtd = tmp / "evil.dtd"
    dtd.write_text(f'<!ENTITY leak SYSTEM "{secret.as_uri()}">\n', encoding="utf-8")
    mzml_body = TINY.read_bytes()
    mzxml_body = MZXML.read_bytes()
    for fmt, body, root in (("mzML", mzml_body, b"indexedmzML"), ("mzXML", mzxml_body, b"mzXML")):
        prolog_end = body.index(b"?>") + 2
        decl, rest = body[:prolog_end], body[prolog_end:]
        doctypes = {
            "xxe_general": (
                b'<!DOCTYPE %s [<!ENTITY xxe SYSTEM "%s">]>' % (root, secret.as_uri().encode()),
                b"&xxe;",
            ),
            "xxe_param_dtd": (
                b'<!DOCTYPE %s [<!ENTITY %% ext SYSTEM "%s"> %%ext;]>'
                % (root, dtd.as_uri().encode()),
                b"&leak;",
            ),
            "billion_laughs": (laughs(root), b"&l9;"),
            "quadratic_blowup": (
                b'<!DOCTYPE %s [<!ENTITY big "%s">]>' % (root, b"B" * 100_000),
                b"&big;" * 20_000,
            ),
        }
        for attack, (doctype, ref) in doctypes.items():
            # The reference goes where pyteomics would copy it into a record: an element's text.
            tag = b"<spectrum " if fmt == "mzML" else b"<scan "
            at = rest.index(tag)
            close = rest.index(b">", at) + 1
            payload = rest[:close] + b"<note>" + ref + b"</note>" + rest[close:]
            suffix = ".mzML" if fmt == "mzML" else ".mzXML"
            yield f"{attack}-{fmt}", write(tmp, attack + suffix, decl + b"\n" + doctype + payload)


def laughs(root: bytes) -> bytes:
    parts = [b'<!ENTITY l0 "lol">']
    for level in range(1, 10):
        parts.append(b'<!ENTITY l%d "%s">' % (level, b"&l%d;" % (level - 1) * 10))
    return b"<!DOCTYPE " + root + b" [" + b"".join(parts) + b"]>"
