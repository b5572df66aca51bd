"""Sampler benchmark: fit one table with nutpie and with PyMC's default NUTS, same model.

Run by hand (not by the tests), e.g.::

    python benchmarks/samplers.py demo_data/colony_samples.csv --draws 1000 --tune 1000 \
        --out bench_samplers

Each sampler runs in its own child process so that its peak memory (max RSS of the child)
is measured alone. Records wall time, compile and sampling time, gradient evaluations per
second, max R-hat, min bulk ESS and ESS per second over the identified quantities
(model.md section 5), divergences and peak memory, and writes ``samplers.json`` plus a
small table.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def child(table: Path, out: Path, sampler: str, draws: int, tune: int, seed: int) -> None:
    from nstress.workflow.pipeline import FitConfig, fit_tables

    cfg = FitConfig(
        sampler={"draws": draws, "tune": tune, "chains": 2, "seed": seed, "sampler": sampler},
        progress=False,
    )
    t0 = time.perf_counter()
    manifest = fit_tables([table], out, cfg, log=lambda m: print(m, file=sys.stderr))
    wall = time.perf_counter() - t0
    diag = manifest["diagnostics"]
    conv = diag["convergence"]
    t = manifest["timings_s"]
    ess = min(v["ess_bulk_min"] for v in conv.values())
    grads = diag["sampler"].get("gradient_evals")
    rec = {
        "sampler": manifest["sampler"],
        "backend": manifest["execution"].get("backend"),
        "draws": draws,
        "tune": tune,
        "wall_s": wall,
        "compile_s": t.get("compile_s"),
        "sample_s": t.get("sample_s"),
        "gradient_evals": grads,
        # kept draws only are stored: scale their count to warm-up + draws (approximate)
        "gradients_per_s": (grads * (draws + tune) / draws / t["sample_s"])
        if grads and t.get("sample_s")
        else None,
        "rhat_max": max(v["rhat_max"] for v in conv.values()),
        "ess_bulk_min": ess,
        "ess_per_s": ess / t["sample_s"] if t.get("sample_s") else None,
        "ess_per_s_wall": ess / wall,
        # min bulk ESS per quantity group (the overall min is set by the worst group)
        "ess_bulk_min_by_group": {k: v["ess_bulk_min"] for k, v in conv.items()},
        "divergences": diag["sampler"].get("divergences", 0),
        "tree_depth_mean": diag["sampler"].get("tree_depth_mean"),
        "diagnostics_ok": diag["ok"],
        "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }
    (out / "bench.json").write_text(json.dumps(rec, indent=2, default=str))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("table", type=Path)
    ap.add_argument("--samplers", nargs="+", default=["nutpie", "pymc"])
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--tune", type=int, default=1000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--out", type=Path, default=None)
    ap.add_argument("--child", nargs=2, metavar=("SAMPLER", "OUT"), help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    if a.child:
        child(a.table, Path(a.child[1]), a.child[0], a.draws, a.tune, a.seed)
        return 0
    out = a.out or Path(tempfile.mkdtemp(prefix="nstress_samplers_"))
    out.mkdir(parents=True, exist_ok=True)
    recs = []
    for s in a.samplers:
        sub = out / s
        cmd = [sys.executable, __file__, str(a.table), "--draws", str(a.draws)]
        cmd += ["--tune", str(a.tune), "--seed", str(a.seed), "--child", s, str(sub)]
        subprocess.run(cmd, check=True)
        recs.append(json.loads((sub / "bench.json").read_text()))
        (out / "samplers.json").write_text(json.dumps(recs, indent=2, default=str))
    print(
        f"{'sampler':8} {'wall s':>7} {'compile':>7} {'sample':>7} {'grad/s':>7} {'R-hat':>6} "
        f"{'ESS':>6} {'ESS/s':>6} {'div':>4} {'peak MB':>8}"
    )
    for r in recs:
        print(
            f"{r['sampler']:8} {r['wall_s']:7.0f} {r['compile_s'] or 0:7.1f} {r['sample_s']:7.0f} "
            f"{r['gradients_per_s'] or 0:7.0f} {r['rhat_max']:6.3f} {r['ess_bulk_min']:6.0f} "
            f"{r['ess_per_s'] or 0:6.2f} {r['divergences']:4d} {r['peak_rss_mb']:8.0f}"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
