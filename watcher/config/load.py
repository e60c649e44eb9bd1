"""YAML config file -> validated ``Config``; every problem is reported with file, line and key.

Steps: read the file (size-capped), parse it with ``watcher.config.yamllines`` (safe, line numbers),
expand ``${NAME}`` / ``${NAME:-default}`` from ``secrets_file`` and then the environment, and
hand the data to ``watcher.config.sections`` (sections; ``watcher.config.checks`` for checks),
which convert it into the frozen dataclasses of ``watcher.config`` through the value readers of
``watcher.config.values``. Conversion never stops at the first problem: it collects them all and
raises one ``ConfigError``. Relative paths resolve against the config file's folder. List
indexes in key paths count from 0. The allowed keys are ``watcher.config.keys.KEYS``.
"""

from __future__ import annotations

import dataclasses
import os
import re
import stat
from pathlib import Path
from typing import TYPE_CHECKING, Any

from watcher.config.sections import build_config
from watcher.config.values import Bad, Values
from watcher.config.yamllines import KeyPath, read_yaml, resolve_plain
from watcher.errors import ConfigError, ConfigProblem

if TYPE_CHECKING:
    from collections.abc import Mapping

    from watcher.config.model import Config

# A lab config is a few kB; refusing big files up front also stops alias bombs before parsing.
MAX_CONFIG_BYTES = 1024 * 1024
_VAR_RE = re.compile(r"\$(\$\{)|\$\{([A-Za-z_][A-Za-z0-9_]*)(?::-([^}]*))?\}")


def load_config(path: Path) -> Config:
    """Read and validate the YAML config at ``path``.

    Raises:
        ConfigError: listing every problem in line order, each naming ``path`` as given.
    """
    source = str(path)
    try:
        size = path.stat().st_size
        if size > MAX_CONFIG_BYTES:
            message = f"refused: {size} bytes is too large for a config (limit {MAX_CONFIG_BYTES})"
            raise ConfigError([ConfigProblem(source, None, "", message)])
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(
            [ConfigProblem(source, None, "", f"cannot read: {exc.strerror}")]
        ) from exc
    except UnicodeDecodeError as exc:
        message = f"cannot read: not UTF-8 text (byte {exc.start})"
        raise ConfigError([ConfigProblem(source, None, "", message)]) from exc
    return load_config_text(text, source=source, base_dir=path.parent)


def load_config_text(
    text: str,
    *,
    source: str,
    base_dir: Path | None = None,
    environ: Mapping[str, str] | None = None,
) -> Config:
    """Validate config YAML given as text.

    Args:
        text: the YAML.
        source: the file name to put in messages and in ``Config.source``.
        base_dir: folder that relative paths resolve against; default: the folder of ``source``.
        environ: variables for ``${NAME}``; default ``os.environ``.
    """
    base = (base_dir if base_dir is not None else Path(source).parent).expanduser().absolute()
    data, lines, problems = read_yaml(text, source=source)
    if problems:
        raise ConfigError(problems)
    values = Values(source, lines, base)
    env = dict(os.environ if environ is None else environ)
    if isinstance(data, dict) and "secrets_file" in data:
        env = _with_secrets(values, data["secrets_file"], env)
    if isinstance(data, dict):
        data.pop("secrets_file", None)  # read above; expanding it again would repeat its problems
    data = _expand(values, data, (), env)
    config = build_config(values, data, Path(source))
    if values.problems:
        raise ConfigError(values.problems)
    return config


def _with_secrets(v: Values, raw: Any, env: dict[str, str]) -> dict[str, str]:
    """``env`` overlaid with the names in the secrets file (which win over the environment)."""
    path_key: KeyPath = ("secrets_file",)
    known_problems = len(v.problems)
    expanded = _expand(v, raw, path_key, env)
    if len(v.problems) > known_problems:
        return env
    try:
        path = v.path(path_key, expanded)
    except Bad:
        return env
    try:
        mode = path.stat().st_mode
        if mode & (stat.S_IRWXG | stat.S_IRWXO):
            v.problem(
                path_key,
                f"refused: {path} is readable by group or others (mode {stat.S_IMODE(mode):04o});"
                f" run chmod 600 {path}",
            )
            return env
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) else "not UTF-8 text"
        v.problem(path_key, f"cannot read secrets file {path}: {reason}")
        return env
    data, _lines, problems = read_yaml(text, source=str(path))
    v.problems.extend(problems)
    if data is None:
        return env
    if not isinstance(data, dict):
        v.problem(path_key, f"{path}: expected a mapping of NAME: value, got {v.show(data)}")
        return env
    out = dict(env)
    for name, value in data.items():
        if isinstance(value, str | int | float) and not isinstance(value, bool):
            out[name] = str(value)
        else:
            v.problem(path_key, f"{path}: {name}: expected text, got {v.show(value)}")
    return out


def _expand(v: Values, data: Any, path: KeyPath, env: Mapping[str, str]) -> Any:
    """``data`` with ``${NAME}`` and ``${NAME:-default}`` replaced in every string value."""
    if isinstance(data, dict):
        return {k: _expand(v, item, (*path, k), env) for k, item in data.items()}
    if isinstance(data, list):
        return [_expand(v, item, (*path, i), env) for i, item in enumerate(data)]
    if not isinstance(data, str) or "$" not in data:
        return data
    missing: list[str] = []

    def substitute(match: re.Match[str]) -> str:
        if match.group(1):  # "$${" is a literal "${"
            return "${"
        name, default = match.group(2), match.group(3)
        if name in env:
            return env[name]
        if default is not None:
            return default
        missing.append(name)
        return ""

    result = _VAR_RE.sub(substitute, data)
    for name in missing:
        v.problem(
            path,
            f"${{{name}}} is not set in the environment or secrets_file and has no default"
            f" (write ${{{name}:-value}} to give one)",
        )
    if "${" in _VAR_RE.sub("", data):
        v.problem(path, f"expected ${{NAME}} or ${{NAME:-default}}, got {data!r}")
    whole = _VAR_RE.fullmatch(data)
    if whole is not None and not whole.group(1):
        return resolve_plain(result)  # "${PORT:-8080}" alone reads like the plain scalar 8080
    return result


def load(path: Path | str) -> Config:
    """Read and validate a YAML config; raises ConfigError listing every problem in line order."""
    return load_config(Path(path))


def load_default() -> Config:
    """The embedded default config (the demo scenario), read from ``watcher/data/default.yaml``."""
    # Beside this package on disk (the wheel installs files, never a zip): importlib.resources
    # would import tempfile, zipfile and random for it, about 4 ms of every `check`.
    default = Path(__file__).resolve().parent.parent / "data" / "default.yaml"
    text = default.read_text(encoding="utf-8")
    config = load_config_text(text, source="<default config>", base_dir=Path.cwd())
    return dataclasses.replace(config, source=None)
