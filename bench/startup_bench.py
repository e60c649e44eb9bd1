"""Start-up benchmark: whole-process CPU of the commands a person waits on.

Each command runs as a fresh process, exactly as typed (``ionwarden`` from the venv), and its
CPU time is the kernel's account of that process and everything it started (user + system,
from ``wait4``'s rusage), so import time, the config load and the measuring are all in. Three
commands, side by side in one run, ``--repeat`` times each (default 15), in turns so that a
burst of load elsewhere touches all of them alike:

* ``ionwarden --help``: the parser only (target <= 0.15 s);
* ``ionwarden check tests/data/mzml/tiny.pwiz.1.1.mzML``: the mzML specification's example
  file, judged with the embedded default config (target <= 0.3 s);
* ``python -c pass``: the interpreter alone, the floor under both.

The project's modules are byte-compiled first (``compileall``), as ``pip install`` does for an
installed copy; an editable checkout run with ``PYTHONDONTWRITEBYTECODE=1`` compiles them on
every start instead, and ``--no-compile`` measures that (about 0.1 s more here). With
``--imports`` it also prints the ten slowest imports of ``check`` (``-X importtime``, self time).

Usage: ``.venv/bin/python bench/startup_bench.py [--repeat 15] [--no-compile] [--imports]``
"""

from __future__ import annotations

import argparse
import compileall
import os
import statistics
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from bench.run_bench import machine  # noqa: E402

TINY = ROOT / "tests" / "data" / "mzml" / "tiny.pwiz.1.1.mzML"
BIN = Path(sys.executable).parent


def _ionwarden() -> list[str]:
    script = BIN / "ionwarden"
    if script.exists():
        return [str(script)]
    return [sys.executable, "-m", "watcher"]  # a checkout without the console script


def commands() -> dict[str, list[str]]:
    return {
        "python -c pass": [sys.executable, "-c", "pass"],
        "ionwarden --help": [*_ionwarden(), "--help"],
        "ionwarden check tiny.mzML": [*_ionwarden(), "check", str(TINY)],
    }


def cpu_of(argv: list[str], env: dict[str, str]) -> tuple[float, float]:
    """(CPU seconds, wall seconds) of one run of ``argv`` and its children."""
    started = time.perf_counter()
    proc = subprocess.Popen(
        argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, cwd=ROOT
    )
    _, _, usage = os.wait4(proc.pid, 0)
    proc.returncode = 0  # reaped by wait4: keep Popen from waiting again
    return usage.ru_utime + usage.ru_stime, time.perf_counter() - started


def slowest_imports(env: dict[str, str], top: int = 10) -> list[tuple[float, str]]:
    """The ``top`` largest self times (ms) of ``-X importtime`` for ``check`` on the tiny file."""
    argv = [sys.executable, "-X", "importtime", "-m", "watcher", "check", str(TINY)]
    out = subprocess.run(argv, capture_output=True, text=True, env=env, cwd=ROOT, check=False)
    rows = []
    for line in out.stderr.splitlines():
        if not line.startswith("import time:") or "self [us]" in line:
            continue
        self_us, _cumulative, name = line.removeprefix("import time:").split("|")
        rows.append((int(self_us) / 1000, name.strip()))
    return sorted(rows, reverse=True)[:top]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=15, help="runs of each command")
    parser.add_argument(
        "--no-compile", action="store_true", help="do not byte-compile watcher/ first"
    )
    parser.add_argument("--imports", action="store_true", help="print the slowest imports")
    args = parser.parse_args(argv)
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    if not args.no_compile:
        compileall.compile_dir(ROOT / "watcher", quiet=1)
    cmds = commands()
    cpu: dict[str, list[float]] = {name: [] for name in cmds}
    wall: dict[str, list[float]] = {name: [] for name in cmds}
    for _ in range(args.repeat):
        for name, cmd in cmds.items():
            c, w = cpu_of(cmd, env)
            cpu[name].append(c)
            wall[name].append(w)
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    state = "not byte-compiled" if args.no_compile else "byte-compiled"
    print(f"{stamp}, {machine()}, load {os.getloadavg()[:2]}, watcher/ {state}")
    for name in cmds:
        c, w = cpu[name], wall[name]
        print(
            f"{name:28s} CPU median {statistics.median(c):.3f} s (best {min(c):.3f}, "
            f"worst {max(c):.3f}); wall median {statistics.median(w):.3f} s; {len(c)} runs"
        )
    if args.imports:
        print("slowest imports of check (self time, -X importtime):")
        for ms, name in slowest_imports(env):
            print(f"  {ms:6.1f} ms  {name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
