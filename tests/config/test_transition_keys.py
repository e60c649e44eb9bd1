"""The transition keys of expected_ions (product_mz, tolerance_mz, ratio_to, expected_ratio):
loaded into the typed config, and every mistake named with file, line and key."""

from __future__ import annotations

import re
import textwrap
from pathlib import Path

import pytest

from watcher.config.load import load_config_text
from watcher.errors import ConfigError

ROOT = Path(__file__).resolve().parents[2]

GOOD = """\
expected_ions:
  - name: quant
    mz: 195.1
    product_mz: 138.1
  - name: qual
    mz: 195.1
    product_mz: 110.1
    tolerance_mz: 0.3
    ratio_to: quant
    expected_ratio: 0.42
  - name: caffeine
    formula: C8H10N4O2
"""


def test_transitions_load_with_their_defaults() -> None:
    """product_mz makes a transition; tolerance_mz defaults to 0.5; a plain ion is no transition."""
    config = load_config_text(GOOD, source="lab.yaml", environ={})
    quant, qual, caffeine = config.expected_ions
    assert (quant.is_transition, quant.product_mz, quant.tolerance_mz) == (True, 138.1, 0.5)
    assert (qual.tolerance_mz, qual.ratio_to, qual.expected_ratio) == (0.3, "quant", 0.42)
    assert caffeine.is_transition is False


@pytest.mark.parametrize(
    ("entry", "line", "key", "fragment"),
    [
        ("  - {name: x, mz: 200, tolerance_mz: 0.3}", 13, "tolerance_mz", "transitions only"),
        ("  - {name: x, mz: 200, ratio_to: quant}", 13, "ratio_to", "transitions only"),
        ("  - {name: x, mz: 200, product_mz: 100, ratio_to: nope}", 13, "ratio_to", "'nope'"),
        (
            "  - {name: x, mz: 200, product_mz: 100, ratio_to: caffeine}",
            13,
            "ratio_to",
            "not a transition",
        ),
        ("  - {name: x, mz: 200, product_mz: 100, ratio_to: x}", 13, "ratio_to", "itself"),
        (
            "  - {name: x, mz: 200, product_mz: 100, expected_ratio: 2}",
            13,
            "expected_ratio",
            "needs ratio_to",
        ),
        ("  - {name: x, mz: 200, product_mz: -5}", 13, "product_mz", ""),
        ("  - {name: x, mz: 200, product_mz: 100, tolerance_mz: 0}", 13, "tolerance_mz", ""),
    ],
)
def test_mistakes_name_file_line_and_key(entry: str, line: int, key: str, fragment: str) -> None:
    """Each mistake is one problem at the entry's line, naming expected_ions[3].<key>.

    GOOD has 12 lines: the appended entry is line 13."""
    with pytest.raises(ConfigError) as caught:
        load_config_text(GOOD + entry + "\n", source="lab.yaml", environ={})
    (problem,) = caught.value.problems
    assert problem.file == "lab.yaml"
    assert problem.line == line
    assert problem.key_path == f"expected_ions[3].{key}"
    assert fragment in problem.message
    assert re.fullmatch(r"lab\.yaml:13: expected_ions\[3\]\.\w+: .+", str(problem))


def test_readme_srm_example_loads() -> None:
    """The README's targeted config example is a valid config (CHAT_URL given)."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("### A targeted (SRM/MRM) config") :]
    body = section[section.index("```yaml") + len("```yaml") : section.index("```\n\n", 10)]
    config = load_config_text(
        textwrap.dedent(body), source="srm.yaml", environ={"CHAT_URL": "json://127.0.0.1:9/x"}
    )
    assert [ion.is_transition for ion in config.expected_ions] == [True, True, True]
    assert config.expected_ions[1].ratio_to == "caffeine-138"
