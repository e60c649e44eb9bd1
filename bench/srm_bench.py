"""Benchmark of a targeted (chromatogram-only) run: the measuring pass against reading its arrays.

Generates (once, cached in bench/out/) a 30 min SRM run of 400 transitions at a 1 s cycle with
a TIC chromatogram (zlib arrays, 64-bit times, 32-bit intensities; synth/srm.py), then, in fresh
child processes pinned to one core, best of N, the methods taking turns:

- **(b)**: lxml iterparse of every chromatogram, base64 + zlib + ``numpy.frombuffer`` of each
  array, nothing else (the "read the arrays once" bar);
- **measure**: ``watcher.measure.run.measure_file`` with 20 expected transitions (10 with an
  ion ratio) and one calibrant (null in a targeted run), completeness check included.

CPU time (user + sys) is taken in the child around the method; imports and the CV load come
first, as in the daemon's long-lived measuring child.

    python bench/srm_bench.py [--repeat 3] [--core N]
"""

from __future__ import annotations

import argparse
import base64
import json
import os
import subprocess
import sys
import time
import zlib
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
OUT = ROOT / "bench" / "out"
sys.path.insert(0, str(ROOT))

_NS = "{http://psi.hupo.org/ms/mzml}"
N_TRANSITIONS = 400
DURATION_S = 1800.0
SPEC_VERSION = "srm-1"


def _transitions() -> tuple[Any, ...]:
    from synth.srm import SrmTransition

    out = []
    for i in range(N_TRANSITIONS):
        precursor = 150.0 + 2.0 * (i // 2)
        out.append(
            SrmTransition(
                name=f"t{i}",
                precursor_mz=precursor,
                product_mz=precursor / 2 + (i % 2) * 10.0,
                apex_rt_s=60.0 + (i * 4.1) % (DURATION_S - 120.0),
                height=1e4 * (1 + i % 7),
                sigma_s=4.0,
            )
        )
    return tuple(out)


def generate() -> Path:
    from synth.srm import SrmSpec, write_srm_mzml

    OUT.mkdir(parents=True, exist_ok=True)
    path = OUT / "srm30.mzML"
    stamp = OUT / "srm30.version"
    if path.exists() and stamp.exists() and stamp.read_text() == SPEC_VERSION:
        return path
    write_srm_mzml(
        path,
        SrmSpec(
            transitions=_transitions(),
            duration_s=DURATION_S,
            cycle_s=1.0,
            baseline=200.0,
            compression="zlib",
            noise_fraction=0.05,
            seed=11,
        ),
    )
    stamp.write_text(SPEC_VERSION)
    return path


def lower_bound(path: Path) -> dict[str, int]:
    """(b): every chromatogram's arrays: base64, zlib, frombuffer."""
    import numpy as np
    from lxml import etree  # type: ignore[import-untyped]

    n_chromatograms = n_values = 0
    with path.open("rb") as fh:
        for _, elem in etree.iterparse(
            fh, events=("end",), tag=f"{_NS}chromatogram", resolve_entities=False,
            no_network=True, load_dtd=False,
        ):  # fmt: skip
            for array in elem.iter(f"{_NS}binaryDataArray"):
                accessions = {cv.get("accession") for cv in array.iter(f"{_NS}cvParam")}
                raw = base64.b64decode(array.findtext(f"{_NS}binary") or "")
                if "MS:1000574" in accessions:
                    raw = zlib.decompress(raw)
                dtype = "<f8" if "MS:1000523" in accessions else "<f4"
                n_values += np.frombuffer(raw, dtype=dtype).size
            n_chromatograms += 1
            elem.clear()
            while elem.getprevious() is not None:
                del elem.getparent()[0]
    return {"chromatograms": n_chromatograms, "values": n_values}


def _prepare_measure() -> Any:
    from watcher.config import Config, ExpectedIon, IonSpec
    from watcher.measure.readers import cv
    from watcher.measure.run import measure_file

    cv.disable_remote()
    cv.load_cv()
    chosen = _transitions()[:20]
    ions = tuple(
        ExpectedIon(
            ion=IonSpec(name=t.name, mz=t.precursor_mz),
            product_mz=t.product_mz,
            ratio_to=chosen[i - 1].name if i % 2 else None,
        )
        for i, t in enumerate(chosen)
    )
    config = Config(calibrants=(IonSpec(name="lock", mz=556.2766),), expected_ions=ions)

    def run(path: Path) -> dict[str, Any]:
        metrics = measure_file(path, config)
        return {
            "found": sum(1 for ion in metrics.expected_ions if ion.found),
            "ratios": sum(1 for ion in metrics.expected_ions if ion.ion_ratio is not None),
            "tic_median": metrics.signal.tic_median,
        }

    return run


def child(method: str, path: Path) -> None:
    if method == "b":
        import numpy  # noqa: F401  (imports before the timer, as for the other method)
        from lxml import etree  # noqa: F401

        fn: Any = lower_bound
    else:
        fn = _prepare_measure()
    cpu0, wall0 = time.process_time(), time.perf_counter()
    result = fn(path)
    cpu_s, wall_s = time.process_time() - cpu0, time.perf_counter() - wall0
    print(json.dumps({"cpu_s": cpu_s, "wall_s": wall_s, "result": result}))


def run_child(method: str, path: Path, core: int) -> dict[str, Any]:
    proc = subprocess.Popen(
        [sys.executable, str(Path(__file__).resolve()), "--child", method, str(path)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        preexec_fn=lambda: os.sched_setaffinity(0, {core}),
        cwd=ROOT,
    )
    out, err = proc.communicate()
    if proc.returncode != 0:
        raise RuntimeError(f"{method} failed: {err.decode(errors='replace')[-800:]}")
    data: dict[str, Any] = json.loads(out.decode().strip().splitlines()[-1])
    return data


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--core", type=int, default=None)
    parser.add_argument("--child", nargs=2, metavar=("METHOD", "FILE"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(args.child[0], Path(args.child[1]))
        return 0
    path = generate()
    core = args.core if args.core is not None else max(os.sched_getaffinity(0))
    load_before = os.getloadavg()[0]
    runs: dict[str, list[dict[str, Any]]] = {"b": [], "m": []}
    for _ in range(args.repeat):
        for method in runs:
            runs[method].append(run_child(method, path, core))
    best = {method: min(done, key=lambda r: r["cpu_s"]) for method, done in runs.items()}
    report = {
        "file": path.name,
        "size_mb": round(path.stat().st_size / 1e6, 1),
        "b_cpu_s": [round(r["cpu_s"], 3) for r in runs["b"]],
        "measure_cpu_s": [round(r["cpu_s"], 3) for r in runs["m"]],
        "ratio_best": round(best["m"]["cpu_s"] / best["b"]["cpu_s"], 2),
        "measure_result": best["m"]["result"],
        "b_result": best["b"]["result"],
        "load_before_after": [load_before, os.getloadavg()[0]],
        "date_utc": time.strftime("%Y-%m-%d %H:%M", time.gmtime()),
    }
    print(json.dumps(report, indent=1))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
