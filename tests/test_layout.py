"""The test tree's own rules: test modules share code only through tests/helpers/, and each test
package mirrors a package of watcher/ (plus e2e/, helpers/ and data/)."""

from __future__ import annotations

import ast
from pathlib import Path

TESTS = Path(__file__).resolve().parent
WATCHER = TESTS.parent / "watcher"
EXTRA_FOLDERS = {"e2e", "helpers", "data"}  # end to end, shared helpers, reference data


def _module_name(path: Path) -> str:
    """Dotted name of a file: tests/notify/conftest.py is tests.notify.conftest."""
    parts = path.relative_to(TESTS.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imported(source: str, package: str) -> list[tuple[int, str]]:
    """(line, absolute module name) of every module ``source`` imports, relative imports resolved
    against ``package`` (the package the file is in)."""
    here = package.split(".")
    out: list[tuple[int, str]] = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            out += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = here[: len(here) - node.level + 1] if node.level else []
            module = ".".join([*base, *([node.module] if node.module else [])])
            # ``from tests import x`` imports the module tests.x when x is one.
            out += [(node.lineno, f"{module}.{alias.name}") for alias in node.names]
            out.append((node.lineno, module))
    return out


def _package(path: Path) -> str:
    name = _module_name(path)
    return name if path.name == "__init__.py" else name.rpartition(".")[0]


def _allowed(module: str) -> bool:
    parts = module.split(".")
    if parts[0] != "tests":
        # A bare ``import conftest`` or ``from test_judge import ...`` is a test module too.
        return not (parts[0] == "conftest" or parts[0].startswith("test_"))
    return len(parts) == 1 or parts[1] == "helpers"


def _python_files() -> list[Path]:
    return sorted(p for p in TESTS.rglob("*.py") if "data" not in p.relative_to(TESTS).parts)


def test_test_modules_import_only_helpers() -> None:
    """No file under tests/ imports a test module or conftest; shared code is in tests/helpers."""
    files = _python_files()
    assert TESTS / "helpers" / "receiver.py" in files  # the walk sees the tree
    bad = [
        f"{path.relative_to(TESTS.parent)}:{line}: imports {module}"
        for path in files
        for line, module in _imported(path.read_text(encoding="utf-8"), _package(path))
        if not _allowed(module)
    ]
    assert bad == []


def test_the_rule_sees_absolute_relative_and_bare_imports() -> None:
    """Each way of importing a test module is caught; helpers, the package and watcher are not."""
    source = (
        "from tests.rules.test_judge import make_metrics\n"
        "from .conftest import Clock\n"
        "from .. import e2e\n"
        "import conftest\n"
        "from test_judge import make_metrics\n"
        "from tests.helpers import records\n"
        "from ..helpers.clock import Clock\n"
        "import watcher.records\n"
    )
    caught = sorted({line for line, m in _imported(source, "tests.notify") if not _allowed(m)})
    assert caught == [1, 2, 3, 4, 5]
    assert _package(TESTS / "notify" / "conftest.py") == "tests.notify"
    assert _package(TESTS / "helpers" / "__init__.py") == "tests.helpers"


def test_each_test_folder_mirrors_a_watcher_package() -> None:
    """tests/<pkg>/... exists only for a package watcher/<pkg>/... (or e2e, helpers, data)."""
    folders = sorted(
        p.relative_to(TESTS)
        for p in TESTS.rglob("*")
        if p.is_dir()
        and not any(part.startswith((".", "_")) for part in p.relative_to(TESTS).parts)
    )
    assert Path("measure") / "readers" in folders  # the walk sees the tree
    orphans = [
        str(folder)
        for folder in folders
        if folder.parts[0] not in EXTRA_FOLDERS and not (WATCHER / folder / "__init__.py").is_file()
    ]
    assert orphans == []
