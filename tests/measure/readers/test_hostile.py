"""Hostile XML: every entity attack is refused quickly, before any parser could expand it."""

from __future__ import annotations

import io
from typing import TYPE_CHECKING

import pytest

from tests.helpers.badfiles import SECRET_MARKER, attack_files
from tests.helpers.refdata import REFERENCE as SHARED_REFERENCE
from watcher.errors import ReadError
from watcher.intake.formats import completeness, sniff_format
from watcher.measure.readers.read import open_run
from watcher.measure.readers.safexml import DOCTYPE_REASON, assert_no_doctype

if TYPE_CHECKING:
    from pathlib import Path

# The four attack files and the 1 s bound are docs/reliability.md R1.1 (docs/reliability.md).
ATTACKS = [
    f"{a}-{f}"
    for f in ("mzML", "mzXML")
    for a in ("xxe_general", "xxe_param_dtd", "billion_laughs", "quadratic_blowup")
]


@pytest.fixture
def attacks(tmp_path: Path) -> dict[str, Path]:
    return dict(attack_files(tmp_path))


@pytest.mark.timeout(60)  # a hang guard (speed is measured in bench/)
@pytest.mark.parametrize("case", ATTACKS)
def test_open_run_refuses_doctype(attacks: dict[str, Path], case: str) -> None:
    """open_run refuses each attack (kind xml-doctype) before expanding it; marker unseen."""
    path = attacks[case]
    with pytest.raises(ReadError) as info, open_run(path) as (_header, scans):
        list(scans)
    assert info.value.kind == "xml-doctype"
    assert info.value.reason == DOCTYPE_REASON
    assert SECRET_MARKER not in str(info.value)
    assert path.name in str(info.value)
    assert str(path.parent) not in str(info.value)


@pytest.mark.timeout(60)  # a hang guard (speed is measured in bench/)
@pytest.mark.parametrize("case", ATTACKS)
def test_lxml_prolog_check_refuses_doctype(attacks: dict[str, Path], case: str) -> None:
    """The lxml prolog check alone (second line behind the byte sniff) refuses each attack."""
    path = attacks[case]
    with pytest.raises(ReadError) as info:
        assert_no_doctype(path)
    assert info.value.kind == "xml-doctype"
    assert SECRET_MARKER not in str(info.value)


@pytest.mark.parametrize("case", ATTACKS)
def test_intake_checks_refuse_doctype(attacks: dict[str, Path], case: str) -> None:
    """sniff_format refuses a DOCTYPE; completeness does not hold the file back to wait on it."""
    path = attacks[case]
    with pytest.raises(ReadError) as info:
        sniff_format(path)
    assert info.value.kind == "xml-doctype"
    assert completeness(path) is None  # refused at once by open_run, not retried for 24 h


def test_prolog_check_reads_streams(attacks: dict[str, Path]) -> None:
    """assert_no_doctype accepts an open stream and names the given file in its error."""
    data = attacks["xxe_general-mzML"].read_bytes()
    with pytest.raises(ReadError) as info:
        assert_no_doctype(io.BytesIO(data), name="QC_0412.mzML")
    assert str(info.value).startswith("QC_0412.mzML: ")


def test_prolog_check_passes_clean_file() -> None:
    """A real mzML without DOCTYPE passes the prolog check (reference tiny.pwiz.1.1.mzML)."""
    assert_no_doctype(SHARED_REFERENCE / "mzml" / "tiny.pwiz.1.1.mzML")


def test_undeclared_entity_is_an_error_not_a_leak(tmp_path: Path) -> None:
    """An entity reference without any DOCTYPE is a well-formedness error, nothing is expanded."""
    body = (SHARED_REFERENCE / "mzml" / "adv_mzqc_in_mzml.mzML").read_bytes()
    at = body.index(b"<spectrum ")
    close = body.index(b">", at) + 1
    path = tmp_path / "S01_undeclared.mzML"
    path.write_bytes(body[:close] + b"<note>&xxe;</note>" + body[close:])
    with pytest.raises(ReadError) as info, open_run(path) as (_header, scans):
        list(scans)
    assert info.value.kind == "corrupt"
    assert "\n" not in str(info.value)  # one line (house rule); libxml2's wording varies


@pytest.mark.timeout(60)  # a hang guard (speed is measured in bench/)
@pytest.mark.parametrize("pad", [0, 4090, 4093, 4096, 9000])
def test_doctype_after_a_long_prolog_is_refused_wherever_the_reads_split_it(
    tmp_path: Path, pad: int
) -> None:
    """The prolog is read in small chunks; a DOCTYPE behind a long comment, straddling a chunk
    boundary, or with an internal subset longer than a chunk (10,000 entity declarations:
    libxml2 stops on them before the root) is still refused as a DOCTYPE."""
    body = (SHARED_REFERENCE / "mzml" / "tiny.pwiz.1.1.mzML").read_bytes()
    declaration = b'<?xml version="1.0" encoding="utf-8"?>\n'
    rest = body[body.index(b"?>") + 2 :]
    comment = b"<!--" + b"x" * pad + b"-->" if pad else b""
    entities = b"".join(b'<!ENTITY e%d "%s">' % (i, b"ha" * 8) for i in range(10_000))
    doctype = b"<!DOCTYPE indexedmzML [" + entities + b"]>"
    path = tmp_path / f"S01_pad{pad}.mzML"
    path.write_bytes(declaration + comment + doctype + rest)
    with pytest.raises(ReadError) as info:
        assert_no_doctype(path)
    assert info.value.kind == "xml-doctype"
