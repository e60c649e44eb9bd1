"""The PSI-MS controlled vocabulary, loaded once per process from psims' bundled copy, offline.

psims tries to download the CV on every load (no timeout) unless told not to; readers run on
instrument PCs behind firewalls, so remote fetching is switched off before the first load.
The mzML readers key everything on accessions and need the CV only to name an unknown term or to
tell whether it is a compression type, so it is loaded lazily, on first use.
"""

from __future__ import annotations

import functools
import gzip
from typing import Any

COMPRESSION_PARENT = "MS:1000572"  # binary data compression type


def disable_remote() -> None:
    """Tell psims never to fetch a vocabulary over the network (idempotent)."""
    from psims.controlled_vocabulary.controlled_vocabulary import obo_cache

    obo_cache.use_remote = False


@functools.cache
def load_cv() -> Any:
    """The PSI-MS CV as a psims ``ControlledVocabulary``; the same object on every call.

    Read straight from the copy psims bundles (its own loader leaves that file open, which
    shows up as a ResourceWarning), with remote fetching off for any later psims use.
    """
    disable_remote()
    # Here, not at the top: importlib.resources brings tempfile and zipfile (about 2 ms), and
    # most runs never need the vocabulary.
    from importlib import resources

    from psims.controlled_vocabulary.controlled_vocabulary import ControlledVocabulary

    bundled = resources.files("psims.controlled_vocabulary.vendor") / "psi-ms.obo.gz"
    with bundled.open("rb") as raw, gzip.GzipFile(fileobj=raw) as obo:
        return ControlledVocabulary.from_obo(obo)


def term_name(accession: str) -> str | None:
    """The CV name of ``accession``, or None when the CV does not know it."""
    term = _term(accession)
    return None if term is None else str(term.name)


def is_compression_term(accession: str) -> bool:
    """True when ``accession`` is (a descendant of) MS:1000572 binary data compression type."""
    term = _term(accession)
    if term is None:
        return False
    seen: set[str] = set()
    stack = [term]
    while stack:
        current = stack.pop()
        if current.id == COMPRESSION_PARENT:
            return True
        if current.id in seen:
            continue
        seen.add(current.id)
        is_a = current.get("is_a")  # the root terms have none
        parents = is_a if isinstance(is_a, list) else [is_a]
        for parent in parents:
            if parent is not None:
                found = _term(_accession_of(parent))
                if found is not None:
                    stack.append(found)
    return False


def _accession_of(reference: Any) -> str:
    # psims gives ``is_a`` as a Reference (``.accession``) or as a plain "ID ! name" string.
    accession = getattr(reference, "accession", None)
    return str(accession) if accession else str(reference).split("!", 1)[0].strip()


def _term(accession: str) -> Any:
    try:
        return load_cv()[accession]
    except KeyError:
        return None
