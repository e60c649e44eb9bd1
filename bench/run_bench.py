"""Benchmark of the measuring pass against the project's own decoding lower bound (b).

Generates (once, cached under bench/out/) a ~100 MB / 30 min centroid run, its non-indexed and
.gz variants, and a ~1 GB / 2 h profile run, all MS1 every 2 s + 10 MS2 per cycle, zlib, indexed.
Then, in fresh child processes pinned to one core, best of N, it measures CPU time (user + sys)
and peak RSS (``os.wait4`` ``ru_maxrss``) of:

* (b)  lxml iterparse + base64 + zlib + ``numpy.frombuffer`` of every array, nothing else;
* (bs) the same with the measuring pass's SIMD decoders (pybase64, ISA-L inflate): not the
       target's bar, shown so that the gain from the decoders alone can be told apart;
* (m)  ``watcher.measure.run.measure_file`` with 2 calibrants and 10 expected ions, including
       the completeness check (tail, index offset, SHA-1; for .gz the whole gzip stream, checked
       in the same decompressing pass as the parse).

CPU time is taken inside the child around the method only (imports and the CV load happen before
the timer, as in a long-lived daemon); the whole-process CPU is shown beside it.

Usage::

    python bench/run_bench.py            # everything (the 1 GB file takes a few minutes to make)
    python bench/run_bench.py --quick    # the 100 MB files only
    python bench/run_bench.py --profile FILE   # cProfile of the measuring pass on one file
"""

from __future__ import annotations

import argparse
import base64
import gzip
import json
import os
import platform
import subprocess
import sys
import time
import zlib
from datetime import UTC, datetime
from functools import partial
from pathlib import Path
from typing import TYPE_CHECKING, Any

ROOT = Path(__file__).resolve().parents[1]
OUT = ROOT / "bench" / "out"
SPEC_VERSION = "1"  # bump when the generated runs change, to invalidate the cache

sys.path.insert(0, str(ROOT))

from synth import CalibrantTruth, RunSpec, TargetTruth, write_mzml  # noqa: E402

if TYPE_CHECKING:
    from collections.abc import Callable

_MZML_NS = "{http://psi.hupo.org/ms/mzml}"

# Ten expected ions: the demo's three QC-mix ions plus seven invented m/z values.
_DEMO_IONS = [("caffeine", 195.087652, 1, 150.0), ("mrfa", 262.636121, 2, 330.0),
              ("reserpine", 609.280657, 1, 540.0)]  # fmt: skip
_EXTRA_MZ = [302.1458, 358.2271, 412.0863, 498.3150, 655.4012, 733.2291, 812.5177]


def _targets(duration_s: float) -> list[TargetTruth]:
    targets = [
        TargetTruth(name=n, mz=mz, charge=z, apex_rt_s=rt, sigma_s=8.0, height=2e6)
        for n, mz, z, rt in _DEMO_IONS
    ]
    step = duration_s / (len(_EXTRA_MZ) + 1)
    targets += [
        TargetTruth(name=f"ion-{i + 1}", mz=mz, apex_rt_s=step * (i + 1), sigma_s=8.0, height=1e6)
        for i, mz in enumerate(_EXTRA_MZ)
    ]
    return targets


def _spec(duration_s: float, *, profile: bool, background_peaks: int) -> RunSpec:
    return RunSpec(
        duration_s=duration_s,
        ms1_interval_s=2.0,
        ms2_per_cycle=10,
        ms2_peaks=150,
        profile=profile,
        background_peaks=background_peaks,
        seed=2026,
        calibrants=[
            CalibrantTruth(name="siloxane-445", mz=445.120025, offset_ppm=1.8, jitter_ppm=0.3),
            CalibrantTruth(name="leu-enk", mz=556.276575, offset_ppm=1.5, jitter_ppm=0.3),
        ],
        targets=_targets(duration_s),
    )


# name -> (writer kwargs, spec factory)
FILES: dict[str, tuple[dict[str, Any], Callable[[], RunSpec]]] = {
    "run30.mzML": ({}, lambda: _spec(1800.0, profile=False, background_peaks=3500)),
    "run30_plain.mzML": (
        {"indexed": False},
        lambda: _spec(1800.0, profile=False, background_peaks=3500),
    ),
    "run30.mzML.gz": ({"gz": True}, lambda: _spec(1800.0, profile=False, background_peaks=3500)),
    "run120p.mzML": ({}, lambda: _spec(7200.0, profile=True, background_peaks=900)),
}
QUICK = ("run30.mzML", "run30_plain.mzML", "run30.mzML.gz")


def generate(name: str) -> Path:
    """Write one bench file unless a complete copy of this spec version is cached."""
    path = OUT / name
    stamp = path.with_name(path.name + ".done")
    if path.exists() and stamp.exists() and stamp.read_text().strip() == SPEC_VERSION:
        return path
    kwargs, make_spec = FILES[name]
    OUT.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    cpu = time.process_time()
    write_mzml(path, make_spec(), **kwargs)
    print(
        f"generated {name}: {path.stat().st_size / 1e6:.1f} MB in "
        f"{time.perf_counter() - started:.1f} s wall, {time.process_time() - cpu:.1f} s CPU",
        flush=True,
    )
    stamp.write_text(SPEC_VERSION)
    return path


# --- the two timed methods (run inside the child) -------------------------------------------


def lower_bound(path: Path, *, simd: bool = False) -> dict[str, int]:
    """(b): iterparse every spectrum, base64 + zlib + frombuffer of every array, nothing else.

    ``simd`` swaps in the decoders the measuring pass uses (pybase64, ISA-L inflate): not the
    target's bar, printed beside it so that the gain from the decoders alone can be told apart.
    """
    import numpy as np
    import pybase64
    from isal import isal_zlib
    from lxml import etree  # type: ignore[import-untyped]

    b64decode = pybase64.b64decode if simd else base64.b64decode
    inflate = isal_zlib.decompress if simd else zlib.decompress

    n_spectra = n_values = 0
    opener = gzip.open if path.name.endswith(".gz") else open
    with opener(path, "rb") as fh:
        for _, elem in etree.iterparse(
            fh, events=("end",), tag=f"{_MZML_NS}spectrum", resolve_entities=False,
            no_network=True, load_dtd=False,
        ):  # fmt: skip
            for array in elem.iter(f"{_MZML_NS}binaryDataArray"):
                accessions = {cv.get("accession") for cv in array.iter(f"{_MZML_NS}cvParam")}
                raw = b64decode(array.findtext(f"{_MZML_NS}binary") or "")
                if "MS:1000574" in accessions:
                    raw = inflate(raw)
                dtype = "<f8" if "MS:1000523" in accessions else "<f4"
                n_values += np.frombuffer(raw, dtype=dtype).size
            n_spectra += 1
            elem.clear()
            while elem.getprevious() is not None:
                del elem.getparent()[0]
    return {"spectra": n_spectra, "values": n_values}


def _bench_config() -> Any:
    from watcher.config import Config, ExpectedIon, IonSpec

    calibrants = (
        IonSpec(name="siloxane-445", mz=445.120025, search_ppm=30.0),
        IonSpec(name="leu-enk", peptide="YGGFL", charge=1, search_ppm=30.0),
    )
    ions = [
        ExpectedIon(ion=IonSpec(name="caffeine", formula="C8H10N4O2", adduct="+H", charge=1)),
        ExpectedIon(ion=IonSpec(name="mrfa", peptide="MRFA", charge=2)),
        ExpectedIon(ion=IonSpec(name="reserpine", formula="C33H40N2O9", adduct="+H", charge=1)),
    ]
    ions += [ExpectedIon(ion=IonSpec(name=f"ion-{i + 1}", mz=mz)) for i, mz in enumerate(_EXTRA_MZ)]
    return Config(calibrants=calibrants, expected_ions=tuple(ions))


def _prepare_measure() -> Callable[[Path], dict[str, Any]]:
    """Import the measuring code and load the CV before the timer, as a long-lived daemon does."""
    from watcher.measure.readers import (
        cv,
    )
    from watcher.measure.run import measure_file

    cv.disable_remote()
    cv.load_cv()
    config = _bench_config()

    def run(path: Path) -> dict[str, Any]:
        metrics = measure_file(path, config)
        found = sum(1 for ion in metrics.expected_ions if ion.found)
        return {
            "ms1": metrics.signal.ms1_count,
            "ms2": metrics.signal.ms2_count,
            "siloxane_ppm": metrics.calibrants[0].median_ppm,
            "ions_found": found,
        }

    return run


def child(method: str, path: Path) -> None:
    """Entry point of the pinned child: time one method, print a JSON line."""
    if method in ("b", "bs"):
        import numpy  # noqa: F401  (import before the timer, like the other method)
        import pybase64  # noqa: F401
        from isal import isal_zlib  # noqa: F401
        from lxml import etree  # noqa: F401

        fn: Callable[[Path], dict[str, Any]] = partial(lower_bound, simd=method == "bs")
    else:
        fn = _prepare_measure()
    cpu0, wall0 = time.process_time(), time.perf_counter()
    result = fn(path)
    cpu_s, wall_s = time.process_time() - cpu0, time.perf_counter() - wall0
    print(json.dumps({"cpu_s": cpu_s, "wall_s": wall_s, "result": result}))


def run_child(method: str, path: Path, core: int) -> dict[str, Any]:
    """One fresh child pinned to ``core``; returns its timings, process CPU and peak RSS."""
    proc = subprocess.Popen(
        [sys.executable, str(Path(__file__).resolve()), "--child", method, str(path)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        preexec_fn=lambda: os.sched_setaffinity(0, {core}),
        cwd=ROOT,
    )
    assert proc.stdout is not None
    assert proc.stderr is not None
    out = proc.stdout.read()
    err = proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise RuntimeError(f"{method} on {path.name} failed: {err.decode(errors='replace')[-800:]}")
    data: dict[str, Any] = json.loads(out.decode().strip().splitlines()[-1])
    data["process_cpu_s"] = usage.ru_utime + usage.ru_stime
    data["rss_mb"] = usage.ru_maxrss / 1024  # Linux reports kilobytes
    return data


def best_of(methods: tuple[str, ...], path: Path, repeat: int, core: int) -> dict[str, Any]:
    """Best CPU time of ``repeat`` runs per method, the methods taking turns.

    Taking turns (b, m, bs, b, m, bs, ...) means a slow minute on the shared machine slows
    every method alike instead of one of them.
    """
    runs: dict[str, list[dict[str, Any]]] = {method: [] for method in methods}
    for _ in range(repeat):
        for method in methods:
            runs[method].append(run_child(method, path, core))
    best = {}
    for method, done in runs.items():
        best[method] = min(done, key=lambda r: r["cpu_s"])
        best[method]["rss_mb"] = max(r["rss_mb"] for r in done)
    return best


def machine() -> dict[str, Any]:
    model = platform.processor() or "?"
    try:
        lscpu = subprocess.run(["lscpu"], capture_output=True, text=True, check=False).stdout
        for line in lscpu.splitlines():
            if line.startswith("Model name:"):
                model = line.split(":", 1)[1].strip()
    except OSError:
        pass
    return {
        "cpu_model": model,
        "cores": os.cpu_count(),
        "python": platform.python_version(),
        "kernel": platform.release(),
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="only the 100 MB files")
    parser.add_argument("--repeat", type=int, default=3, help="best of N (default 3)")
    parser.add_argument("--core", type=int, default=None, help="CPU core to pin (default: last)")
    parser.add_argument("--child", nargs=2, metavar=("METHOD", "FILE"), help=argparse.SUPPRESS)
    parser.add_argument("--profile", metavar="FILE", help="cProfile the measuring pass")
    args = parser.parse_args(argv)
    if args.child:
        child(args.child[0], Path(args.child[1]))
        return 0
    if args.profile:
        import cProfile
        import pstats

        run = _prepare_measure()
        profiler = cProfile.Profile()
        profiler.runcall(run, Path(args.profile))
        pstats.Stats(profiler).sort_stats("cumulative").print_stats(30)
        return 0
    core = args.core if args.core is not None else max(os.sched_getaffinity(0))
    load_before = os.getloadavg()
    names = QUICK if args.quick else tuple(FILES)
    paths = [generate(name) for name in names]
    rows = []
    for path in paths:
        best = best_of(("b", "m", "bs"), path, args.repeat, core)
        b, m, bs = best["b"], best["m"], best["bs"]
        rows.append(
            {"file": path.name, "size_mb": path.stat().st_size / 1e6, "b": b, "m": m, "bs": bs}
        )
        print(
            f"{path.name}: (b) {b['cpu_s']:.2f} s, measure {m['cpu_s']:.2f} s "
            f"= {m['cpu_s'] / b['cpu_s']:.2f} x (b), RSS {m['rss_mb']:.0f} MB; "
            f"(b) with SIMD decoders {bs['cpu_s']:.2f} s",
            flush=True,
        )
    report = {
        "date": datetime.now(tz=UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "machine": machine(),
        "repeat": args.repeat,
        "pinned_core": core,
        # 1-minute load average of the whole machine, before and after (other work shares it).
        "load_1min": [round(load_before[0], 2), round(os.getloadavg()[0], 2)],
        "rows": rows,
    }
    OUT.mkdir(parents=True, exist_ok=True)
    (OUT / "results.json").write_text(json.dumps(report, indent=2))
    print()
    print(f"{report['date']}, {report['machine']}, load {report['load_1min']}")
    print(table(report))
    return 0


def table(report: dict[str, Any]) -> str:
    """Markdown table of a results report."""
    lines = [
        "| file | size MB | (b) CPU s | (b) RSS MB | measure CPU s | measure process CPU s "
        "| measure wall s | measure RSS MB | x (b) | (b) SIMD CPU s | x (b) SIMD |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for r in report["rows"]:
        b, m, bs = r["b"], r["m"], r["bs"]
        lines.append(
            f"| {r['file']} | {r['size_mb']:.1f} | {b['cpu_s']:.2f} | {b['rss_mb']:.0f} "
            f"| {m['cpu_s']:.2f} | {m['process_cpu_s']:.2f} | {m['wall_s']:.2f} "
            f"| {m['rss_mb']:.0f} | {m['cpu_s'] / b['cpu_s']:.2f} "
            f"| {bs['cpu_s']:.2f} | {m['cpu_s'] / bs['cpu_s']:.2f} |"
        )
    return "\n".join(lines)


if __name__ == "__main__":
    sys.exit(main())
