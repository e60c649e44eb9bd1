"""A vendor-run converter for tests: ``converter.py INPUT -o OUTPUT_DIR [--mode MODE] ...``.

It stands in for the lab's own converter (the daemon's ``convert.command``). In mode ``ok`` it
writes OUTPUT_DIR/<run name>.mzML, a synthetic run from synth/ whose siloxane calibrant sits
``--offset-ppm`` off (known truth), after checking that INPUT is there and reading every file
under it (as a converter reads the raw data). Failure modes by argument:

* ``fail``: two lines on stderr, exit code 3;
* ``hang``: starts a helper process in its own process group, writes both pids to ``--pids``,
  then sleeps past any limit (the daemon must kill the whole group);
* ``nothing``: exit 0 without writing a file;
* ``crash``: killed by SIGSEGV.

``--runs FILE`` appends one line per conversion (how often a run was converted).
"""

from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

# The repository root, so that synth/ imports when the daemon runs this as a script.
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import synth

SILOXANE_MZ = 445.120025  # polysiloxane background ion [C2H6SiO]6+H+ (common practice, lock mass)
HELPER = "import time; time.sleep(600)"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("input", type=Path)
    parser.add_argument("-o", dest="output_dir", type=Path, required=True)
    parser.add_argument("--mode", default="ok", choices=("ok", "fail", "hang", "nothing", "crash"))
    parser.add_argument("--offset-ppm", type=float, default=0.0)
    parser.add_argument("--runs", type=Path)
    parser.add_argument("--pids", type=Path)
    args = parser.parse_args(argv)
    if args.runs is not None:
        with args.runs.open("a") as fh:
            fh.write(f"{args.input.name}\n")
    if args.mode == "fail":
        sys.stderr.write("opening acquisition data\n")
        sys.stderr.write(f"cannot read {args.input.name}: method file missing\n")
        return 3
    if args.mode == "hang":
        helper = subprocess.Popen([sys.executable, "-c", HELPER])
        if args.pids is not None:
            args.pids.write_text(f"{os.getpid()} {helper.pid}\n")
        sys.stderr.write("converting (this one never ends)\n")
        sys.stderr.flush()
        time.sleep(600)
        return 0
    if args.mode == "crash":
        os.kill(os.getpid(), signal.SIGSEGV)
    if args.mode == "nothing":
        sys.stderr.write("no spectra in acquisition\n")
        return 0
    total = 0
    for path in sorted(args.input.rglob("*")) if args.input.is_dir() else [args.input]:
        if path.is_file():
            total += len(path.read_bytes())
    spec = synth.RunSpec(
        duration_s=20,
        ms2_per_cycle=1,
        background_peaks=20,
        seed=total % 1000,
        calibrants=[
            synth.CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=args.offset_ppm)
        ],
        start_time=datetime(2026, 12, 3, 2, 0, tzinfo=UTC),
    )
    stem = args.input.name.split(".")[0]
    synth.write_mzml(args.output_dir / f"{stem}.mzML", spec, indexed=True)
    sys.stderr.write(f"wrote {stem}.mzML\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
