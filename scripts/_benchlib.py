"""Helpers shared by scripts/bench and the side-by-side scripts scripts/bench_*.py.

Our numbers come from the Google Benchmark programs in build-bench/tests/benchmarks (or
$APSIDES_BENCH_DIR). scripts/bench runs each kernel program once per SIMD target and
leaves the JSON files in $APSIDES_BENCH_JSON_DIR as <program>.<target>[.<part>].json; a script run
on its own (no such directory) runs the program itself. References measured by a
side-by-side script (numpy, astropy) are saved there as ref_<name>.json so that the final
summary of scripts/bench quotes the same run without measuring them twice.
"""
import json
import os
import pathlib
import subprocess
import sys

ROOT = pathlib.Path(__file__).resolve().parent.parent
BUILD = pathlib.Path(os.environ.get("APSIDES_BENCH_DIR", ROOT / "build-bench"))
BENCH = BUILD / "tests" / "benchmarks"


def binary(program):
    path = BENCH / program
    if not path.exists():
        sys.exit(f"{path} not found: run scripts/bench first (it builds the benchmarks)")
    return path


def json_dir():
    d = os.environ.get("APSIDES_BENCH_JSON_DIR")
    return pathlib.Path(d) if d else None


def targets(program="kepler_benchmark"):
    """SIMD targets to report: $APSIDES_BENCH_TARGETS (space separated), else the best."""
    env = os.environ.get("APSIDES_BENCH_TARGETS")
    if env:
        return env.split()
    out = subprocess.run([str(binary(program)), "--apsides_simd_targets"], check=True,
                         capture_output=True, text=True).stdout.split()
    return out[:1]


def _by_name(doc):
    """name -> benchmark entry; with repetitions, the median aggregate under the plain name."""
    runs = {}
    for b in doc["benchmarks"]:
        if b.get("run_type") == "aggregate":
            if b.get("aggregate_name") != "median":
                continue
            runs[b["run_name"]] = b
        else:
            runs.setdefault(b.get("run_name", b["name"]), b)
    return runs


def results(program, target, args=()):
    """Benchmark entries of `program` run under SIMD target `target`."""
    d = json_dir()
    if d is not None:
        files = sorted(d.glob(f"{program}.{target}.json")) + sorted(d.glob(f"{program}.{target}.*.json"))
        if files:
            runs = {}
            for f in files:
                runs.update(_by_name(json.loads(f.read_text())))
            return runs
    env = dict(os.environ, APSIDES_SIMD_TARGET=target)
    out = subprocess.run([str(binary(program)), "--benchmark_format=json", *args], env=env, check=True,
                         capture_output=True, text=True).stdout
    return _by_name(json.loads(out))


def save_reference(name, values):
    d = json_dir()
    if d is not None:
        (d / f"ref_{name}.json").write_text(json.dumps(values))


def load_reference(name):
    d = json_dir()
    if d is None or not (d / f"ref_{name}.json").exists():
        return None
    return json.loads((d / f"ref_{name}.json").read_text())
