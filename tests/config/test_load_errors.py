"""Every kind of config mistake is reported with file, line, key path and what was expected."""

from __future__ import annotations

import textwrap

import pytest

from tests.helpers.configs import BAD_CONFIG_CASES, marker_line
from watcher.config.load import load_config_text
from watcher.errors import ConfigError, ConfigProblem


def find(problems: list[ConfigProblem], key_path: str, fragment: str) -> ConfigProblem:
    for problem in problems:
        if problem.key_path == key_path and fragment in problem.message:
            return problem
    raise AssertionError(f"no problem at {key_path!r} containing {fragment!r} in {problems}")


@pytest.mark.parametrize(("text", "key_path", "fragment"), BAD_CONFIG_CASES)
def test_problem_names_file_line_and_key(text: str, key_path: str, fragment: str) -> None:
    """The mistake is reported at the marked line, under its key path, saying what was expected."""
    with pytest.raises(ConfigError) as caught:
        load_config_text(text, source="lab.yaml", environ={})
    problem = find(caught.value.problems, key_path, fragment)
    assert problem.file == "lab.yaml"
    assert problem.line == marker_line(text)
    prefix = f"lab.yaml:{problem.line}: {key_path}: " if key_path else f"lab.yaml:{problem.line}: "
    assert str(problem).startswith(prefix)


def test_every_problem_is_reported_in_line_order() -> None:
    """Validation does not stop at the first problem: all three come back, sorted by line."""
    text = textwrap.dedent(
        """\
        watch:
          settle_s: -1
        calibrants:
          - {name: a, mz: 445.12, serch_ppm: 30}
        checks:
          - name: drift
            metric: calibrant.a.median_ppm
            critical: {outside: [5, -5]}
        """
    )
    with pytest.raises(ConfigError) as caught:
        load_config_text(text, source="lab.yaml", environ={})
    lines = [p.line for p in caught.value.problems]
    assert lines == [2, 4, 8]
    assert str(caught.value).splitlines()[1] == (
        "lab.yaml:4: calibrants[0]: unknown key 'serch_ppm' (did you mean 'search_ppm'?)"
    )
