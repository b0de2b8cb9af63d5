"""Predicting a large file with a built model: memory stays flat however many rows.

A tree and a forest are swept and built on the greenhouse demo data (3 000 rows), then
`foldwise predict` (runner.model.predict.predict_file, chunks of 100 000 rows) predicts
files of the same generator's rows: 200 000 and 2 000 000 rows. Each prediction runs in a
fresh child process, which reports its peak resident memory (ru_maxrss) and its time; the
plain way - pandas.read_csv of the whole file, the pipeline's predict, to_csv - runs the
same way for comparison. Flat memory means the 2 M-row peak is about the 200 k-row peak.
Peaks are the child's VmHWM, reset once the model is loaded (Linux /proc), so they are the
memory of predicting with the model in memory.

Run: python benchmarks/predict.py [--rows 2000000] [--keep-files DIR]
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

SPEC = """
name: predict-bench
data: {path: train.csv, target: yield_kg_m2, drop: [bay_row],
       categorical: [cultivar, glazing, irrigation]}
test: {fraction: 0.2, seed: 11}
folds: {k: 3, repeats: 1, seed: 2026}
metrics: [rmse]
store: store.duckdb
explain: {cells: none}
models:
  tree: {family: pruned_tree, grid: {ccp_fraction: [0.0005], min_samples_leaf: [5]}}
  forest: {family: forest, grid: {n_estimators: [100], max_features: [0.33],
                                  min_samples_leaf: [5]}}
"""


def _status_mib(field: str) -> float:
    """VmRSS (now) or VmHWM (peak since the last reset) of this process, in MiB."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) / 1024
    return float("nan")


def _reset_peak() -> None:
    """Start the peak afresh (Linux: writing 5 to clear_refs resets VmHWM); ru_maxrss
    would also count what the parent held before it started this process."""
    Path("/proc/self/clear_refs").write_text("5")


def child(kind: str, model: str, data: str, out: str) -> None:
    """One prediction in this process; prints JSON with peak memory and seconds."""
    from runner.model.keep import load_model

    loaded = load_model(model)
    _reset_peak()
    before = _status_mib("VmRSS")
    start = time.perf_counter()
    if kind == "foldwise":
        from runner.model.predict import predict_file

        predict_file(loaded, data, out, keep=["bay_row"])
    else:
        import pandas as pd

        from runner.write.data import type_features

        df = pd.read_csv(data)
        names = [f["name"] for f in loaded.card["features"]]
        cats = [f["name"] for f in loaded.card["features"] if f["type"] == "categorical"]
        X, _, _ = type_features(df[names], cats, Path(data))
        pd.DataFrame({"bay_row": df["bay_row"], "predicted": loaded.pipeline.predict(X)}
                     ).to_csv(out, index=False)
    print(json.dumps({"seconds": time.perf_counter() - start,
                      "peak_mib": _status_mib("VmHWM"), "loaded_mib": before}))


def _run_child(kind: str, model: Path, data: Path, out: Path) -> dict:
    res = subprocess.run([sys.executable, __file__, "--child", kind, str(model), str(data),
                          str(out)], capture_output=True, text=True, check=True)
    out.unlink(missing_ok=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=2_000_000)
    parser.add_argument("--keep-files", default=None)
    parser.add_argument("--child", nargs=4, default=None)
    args = parser.parse_args()
    if args.child:
        child(*args.child)
        return
    from runner.demo import make_greenhouse
    from runner.model.build import build_model
    from runner.store import Store
    from runner.write.engine import run_sweep
    from runner.write.spec import load_spec

    from _table import print_table

    folder = Path(args.keep_files or tempfile.mkdtemp(prefix="foldwise-predict-"))
    folder.mkdir(parents=True, exist_ok=True)
    make_greenhouse(3000, seed=7).to_csv(folder / "train.csv", index=False)
    (folder / "spec.yaml").write_text(SPEC)
    sweep = run_sweep(load_spec(folder / "spec.yaml"), jobs=2)
    store = Store(sweep.store_path)
    models = {m: build_model(store, model=m, out=folder / f"{m}.skops").artefact
              for m in ("tree", "forest")}
    sizes = sorted({args.rows // 10, args.rows})
    files = {}
    for n in sizes:
        start = time.perf_counter()
        path = folder / f"new_{n}.csv"
        # written in pieces so that making the file does not itself need the memory
        for i, lo in enumerate(range(0, n, 500_000)):
            part = make_greenhouse(min(500_000, n - lo), seed=100 + i)
            part.to_csv(path, mode="a", header=i == 0, index=False)
        files[n] = path
        print(f"wrote {path.name}: {n:,} rows, {path.stat().st_size / 2**20:.0f} MiB "
              f"({time.perf_counter() - start:.0f} s)", file=sys.stderr)
    rows = []
    for label, model in models.items():
        for n in sizes:
            for kind in ("foldwise", "plain"):
                r = _run_child(kind, model, files[n], folder / "out.csv")
                rows.append({"model": label, "rows": f"{n:,}", "way": kind,
                             "seconds": f"{r['seconds']:.1f}",
                             "rows/s": f"{n / r['seconds']:,.0f}",
                             "peak MiB": f"{r['peak_mib']:.0f}",
                             "above loaded model": f"{r['peak_mib'] - r['loaded_mib']:.0f}"})
    header = list(rows[0])
    print_table("predicting a file: peak resident memory of a fresh process (foldwise: "
                "chunks of 100 000 rows; plain: the whole file at once)", header,
                [[r[h] for h in header] for r in rows])
    for label in models:
        got = {(r["rows"], r["way"]): float(r["peak MiB"]) for r in rows if r["model"] == label}
        small, large = f"{sizes[0]:,}", f"{sizes[-1]:,}"
        print(f"{label}: foldwise peak {large} rows / {small} rows = "
              f"{got[(large, 'foldwise')] / got[(small, 'foldwise')]:.2f}; plain / foldwise at "
              f"{large} rows = {got[(large, 'plain')] / got[(large, 'foldwise')]:.1f}")
    if not args.keep_files:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
