"""The shipped systemd unit: verified and rated offline by systemd-analyze, with the agreed keys."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

UNIT = Path(__file__).resolve().parents[1] / "systemd" / "ionwarden.service"
ANALYZE = shutil.which("systemd-analyze")
needs_analyze = pytest.mark.skipif(ANALYZE is None, reason="systemd-analyze is not installed")


def _settings() -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for line in UNIT.read_text().splitlines():
        if line and not line.startswith(("#", "[")) and "=" in line:
            key, _, value = line.partition("=")
            out.setdefault(key.strip(), []).append(value.strip())
    return out


@needs_analyze
def test_verify_passes():
    """`systemd-analyze verify` accepts the unit (syntax, values, an executable ExecStart)."""
    proc = subprocess.run(
        [ANALYZE, "verify", str(UNIT)], capture_output=True, text=True, timeout=60, check=False
    )
    assert proc.returncode == 0, proc.stderr


@needs_analyze
def test_security_exposure_under_threshold():
    """`systemd-analyze security --offline=yes --threshold=20` passes (scale 0-100)."""
    proc = subprocess.run(
        [ANALYZE, "security", "--offline=yes", "--threshold=20", str(UNIT)],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert proc.returncode == 0, proc.stdout[-2000:] + proc.stderr


def test_required_settings():
    """Type=notify with watchdog, reload by HUP, no restart on exit 2, hardening as agreed."""
    s = _settings()
    expected = {
        "Type": "notify",
        "NotifyAccess": "main",
        "WatchdogSec": "60s",
        "ExecReload": "/bin/kill -HUP $MAINPID",
        "Restart": "on-failure",
        "RestartPreventExitStatus": "2",
        "User": "ionwarden",
        "Group": "ionwarden",
        "ProtectSystem": "strict",
        "NoNewPrivileges": "yes",
        "PrivateTmp": "yes",
        "PrivateDevices": "yes",
        "ProtectHome": "yes",
        "CapabilityBoundingSet": "",
        "MemoryDenyWriteExecute": "yes",
        "RestrictNamespaces": "yes",
        "RestrictAddressFamilies": "AF_UNIX AF_INET AF_INET6",
    }
    for key, value in expected.items():
        assert s.get(key) == [value], key
    assert s["SystemCallFilter"] == ["@system-service", "~@privileged @resources"]
    for key in (
        "StateDirectory",
        "LogsDirectory",
        "ReadWritePaths",
        "ReadOnlyPaths",
        "MemoryMax",
        "TasksMax",
        "ProtectKernelTunables",
        "ProtectKernelModules",
        "ProtectKernelLogs",
        "ProtectControlGroups",
        "ProtectClock",
        "ProtectHostname",
    ):
        assert key in s, key


def test_every_setting_has_a_reason():
    """Each [Service] setting is preceded by a comment line saying why (house style)."""
    lines = UNIT.read_text().splitlines()
    start = lines.index("[Service]")
    end = lines.index("[Install]")
    last_comment = -10
    for i in range(start + 1, end):
        line = lines[i]
        if line.startswith("#"):
            last_comment = i
        elif line.strip():
            # A comment may cover a short group of related lines (up to 4 below it).
            assert i - last_comment <= 4, f"line {i + 1} has no reason: {line}"
