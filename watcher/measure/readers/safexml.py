"""Hostile-XML defence: refuse a DOCTYPE before any streaming parse; the only XML parsers we use.

Real mzML and mzXML are XSD-based and never need a DOCTYPE; every entity trick (external
entities, parameter entities through a local .dtd, billion laughs, quadratic blowup) needs one.
pyteomics' streaming parse cannot switch entity resolution off (docs/reliability.md, item 1), so the
prolog is checked here first, with lxml set to resolve nothing, load nothing and fetch nothing.
"""

from __future__ import annotations

import threading
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

from lxml import etree  # type: ignore[import-untyped, unused-ignore]

from watcher.errors import ReadError

if TYPE_CHECKING:
    from collections.abc import Iterator

DOCTYPE_REASON = "XML DOCTYPE/entity declarations are not allowed in run files"

# The root start tag is within the first few hundred bytes of a run file; the pull parser
# builds every element of what it is fed, so a 64 KiB first chunk cost each run about 1 ms.
_CHUNK_BYTES = 4 * 1024
_MAX_PROLOG_BYTES = 16 * 1024 * 1024  # a prolog this long is no run file; stop reading

# Options shared by every parser in ionwarden: no entity substitution, no DTD, no network,
# and libxml2's default size limits (huge_tree off) so a crafted text node cannot grow unbounded.
_SAFE_OPTIONS: dict[str, Any] = {
    "resolve_entities": False,
    "load_dtd": False,
    "no_network": True,
    "huge_tree": False,
    "dtd_validation": False,
}


class Readable(Protocol):
    """Anything with ``read(n) -> bytes``: a file, a GzipFile, a counted wrapper."""

    def read(self, size: int = ..., /) -> bytes: ...


def safe_parser() -> etree.XMLParser:
    """A new lxml parser that never resolves entities, loads a DTD or touches the network."""
    return etree.XMLParser(remove_blank_text=False, **_SAFE_OPTIONS)


def safe_iterparse(
    source: Readable, *, events: tuple[str, ...], tag: str | tuple[str, ...] | None = None
) -> Iterator[tuple[str, Any]]:
    """``lxml.etree.iterparse`` with the safe options; huge_tree stays off."""
    return iter(etree.iterparse(source, events=events, tag=tag, **_SAFE_OPTIONS))


def parse_fragment(data: bytes) -> Any:
    """Parse one well-formed XML fragment (a spectrum element cut from a file) safely."""
    # Building a parser costs more than parsing a spectrum header: keep one per thread.
    parser = getattr(_local, "parser", None)
    if parser is None:
        parser = _local.parser = safe_parser()
    return etree.fromstring(data, parser=parser)


_local = threading.local()


def assert_no_doctype(source: Path | Readable, *, name: str | None = None) -> None:
    """Read only the prolog, up to the root start tag, and refuse the file if it has a DOCTYPE.

    Args:
        source: a path, or a binary stream positioned at the start (e.g. ``gzip.open``); a stream
            is read from but not closed or rewound.
        name: the file name to put in errors when ``source`` is a stream.

    Raises:
        ReadError: ``kind="xml-doctype"`` on any DOCTYPE; ``kind="corrupt"`` when the prolog is
            not XML or holds no root element.
    """
    if isinstance(source, Path):
        try:
            with source.open("rb") as fh:
                _check_stream(fh, source)
        except OSError as exc:
            raise ReadError(source, f"cannot read file: {exc.strerror or exc}", kind="io") from exc
        return
    _check_stream(source, Path(name or "<stream>"))


def _check_stream(fh: Readable, path: Path) -> None:
    parser = etree.XMLPullParser(events=("start",), **_SAFE_OPTIONS)
    read_bytes = 0
    doctype_seen = False
    tail = b""  # the end of the previous chunk: "<!DOCTYPE" may straddle two
    while read_bytes < _MAX_PROLOG_BYTES:
        try:
            chunk = fh.read(_CHUNK_BYTES)
        except (OSError, EOFError) as exc:
            raise ReadError(path, f"cannot read the XML prolog ({exc})", kind="corrupt") from exc
        read_bytes += len(chunk)
        if not chunk:
            raise ReadError(path, "XML ends before the root element", kind="corrupt")
        doctype_seen = doctype_seen or b"<!DOCTYPE" in tail + chunk
        tail = chunk[-8:]
        try:
            parser.feed(chunk)
            for _event, element in parser.read_events():
                docinfo = element.getroottree().docinfo
                if docinfo.doctype or docinfo.internalDTD is not None:
                    raise ReadError(path, DOCTYPE_REASON, kind="xml-doctype")
                return
        except etree.XMLSyntaxError as exc:
            # libxml2 reports entity-declaration abuse as a syntax error inside the DTD.
            if doctype_seen or "entity" in str(exc).lower():
                raise ReadError(path, DOCTYPE_REASON, kind="xml-doctype") from None
            reason = f"not well-formed XML ({_first_line(exc)})"
            raise ReadError(path, reason, kind="corrupt") from None
    raise ReadError(path, "no root element in the first 16 MiB", kind="corrupt")


def _first_line(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return text[:200]
