"""Scaling benchmark: cost and convergence of one model as the colony grows (run by hand).

For each colony size (default 10, 50, 100, 200, 500 animals; about 30 whisker segments per
animal, half the animals with about 13 paired plasma and red-cell draws, all from the forward
simulator) and each sampler (nutpie, PyMC's default NUTS), one fit runs in its own child
process, so that its peak memory (max RSS) is its own. Records compile and sampling time,
gradient evaluations per second, max R-hat, min bulk ESS and ESS per second, divergences,
peak memory and the recovery figures; and times one log-density-plus-gradient evaluation of
the compiled model against a hand-vectorised NumPy evaluation of the same log-likelihood
(the model's own NumPy equations at the true parameters, no gradient) as a floor. E.g.::

    python benchmarks/scaling.py --sizes 10 50 100 --samplers nutpie --draws 500 --tune 500 \
        --out bench_scaling

Writes ``scaling.json`` (one record per size and sampler) and prints a table. Cost per
animal: sampling seconds per gradient evaluation per animal (flat if no step is quadratic in
the number of animals).
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

import numpy as np


def _spec(n: int, seed: int):
    from nstress.model.simulate import ColonySpec

    return ColonySpec(n_individuals=n, seed=seed, n_segments=30, blood_share=0.5, n_draws=13)


def numpy_loglik(built, params, shift_size, gamma, extra_sd, pi, onset_sd) -> float:
    """The model's marginal log-likelihood (the Potential of build.py) in NumPy."""
    from nstress.model import forward
    from nstress.model.build import episode_mixture, onset_log_weights_grid

    tb, grid = built.timebase, built.grid
    gi = tb.group_index
    pred = forward.predict(tb, grid, params)
    ll_none, ll_ep = forward.candidate_logliks(tb, pred, gamma, shift_size, extra_sd)
    log_u = forward.shift_log_prior(grid, shift_size is not None)
    logw = onset_log_weights_grid(grid, tb, built.mu_grid, onset_sd)
    lp0, lp1 = episode_mixture(ll_none, ll_ep, log_u, logw, np.log(pi[gi]), np.log1p(-pi[gi]))
    per_mu = np.logaddexp(lp0[:, None], lp1)
    onehot = (gi[None, :] == np.arange(len(tb.groups))[:, None]).astype(float)
    by_group = built.mu_log_prior + onehot @ per_mu
    top = by_group.max(axis=1, keepdims=True)
    return float(np.sum(top[:, 0] + np.log(np.exp(by_group - top).sum(axis=1))))


def time_evaluations(sim, built, reps: int = 20) -> dict:
    """Seconds per compiled logp+grad (PyTensor -> JAX) and per NumPy log-likelihood."""
    import dataclasses

    p = sim.params
    grid = built.grid
    cand = dataclasses.replace(p, onset=grid.onset_days, shift_start=grid.shift_days)
    n_t, n_k = len(built.timebase.tissues), 2
    extra = np.full((n_t, n_k), 0.1)
    pi = np.full(len(built.timebase.groups), 0.5)
    numpy_loglik(built, cand, p.shift_size, p.gamma, extra, pi, 10.0)  # warm
    t0 = time.perf_counter()
    for _ in range(reps):
        numpy_loglik(built, cand, p.shift_size, p.gamma, extra, pi, 10.0)
    t_np = (time.perf_counter() - t0) / reps
    out = {"numpy_loglik_ms": 1e3 * t_np}
    try:
        m = built.model
        t0 = time.perf_counter()
        f = m.logp_dlogp_function(ravel_inputs=True, mode="JAX")
        f.set_extra_values({})
        x = np.concatenate([np.ravel(v) for v in m.initial_point().values()])
        f._pytensor_function(x)
        out["compile_logp_grad_s"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        for _ in range(reps):
            f._pytensor_function(x)
        out["logp_grad_ms"] = 1e3 * (time.perf_counter() - t0) / reps
        out["dimension"] = int(x.size)
    except Exception as exc:  # noqa: BLE001 - a benchmark records what failed
        out["logp_grad_error"] = f"{type(exc).__name__}: {exc}"
    return out


def child(n: int, sampler: str, draws: int, tune: int, chains: int, seed: int, out: Path) -> None:
    import pandas as pd

    from nstress.model.build import ModelSpec, build_model
    from nstress.model.simulate import simulate_colony, table_to_samples, write_simulation
    from nstress.prep.timebase import build_timebase
    from nstress.products.recovery import recovery_metrics
    from nstress.workflow.pipeline import FitConfig, fit_tables

    sim = simulate_colony(_spec(n, seed))
    write_simulation(sim, out / "data")
    tb = build_timebase(table_to_samples(sim.table))
    evals = time_evaluations(sim, build_model(tb, ModelSpec()))
    cfg = FitConfig(
        sampler={"draws": draws, "tune": tune, "chains": chains, "seed": seed, "sampler": sampler},
        progress=False,
        report=False,
    )
    t0 = time.perf_counter()
    manifest = fit_tables([out / "data" / "samples.csv"], out / "fit", cfg)
    wall = time.perf_counter() - t0
    diag, t = manifest["diagnostics"], manifest["timings_s"]
    conv = diag["convergence"]
    grads = diag["sampler"].get("gradient_evals")
    ess = min(v["ess_bulk_min"] for v in conv.values())
    sample_s = t.get("sample_s") or float("nan")
    # gradient_evals counts kept draws: scale to warm-up + kept (approximate)
    all_grads = grads * (draws + tune) / draws if grads else None
    tl = pd.read_csv(out / "fit" / "timelines.csv")
    sc = pd.read_csv(out / "fit" / "screening.csv")
    rec = {
        "n": n,
        "sampler": manifest["sampler"],
        "draws": draws,
        "tune": tune,
        "chains": chains,
        "wall_s": wall,
        "compile_s": t.get("compile_s"),
        "sample_s": sample_s,
        "gradient_evals": grads,
        "gradients_per_s": all_grads / sample_s if all_grads else None,
        "s_per_gradient_per_animal": sample_s / all_grads / n if all_grads else None,
        "rhat_max": max(v["rhat_max"] for v in conv.values()),
        "ess_bulk_min": ess,
        "ess_per_s": ess / sample_s,
        "divergences": diag["sampler"].get("divergences", 0),
        "tree_depth_mean": diag["sampler"].get("tree_depth_mean"),
        "diagnostics_ok": diag["ok"],
        "recovery": recovery_metrics(tl, sc, sim.truth_bins, sim.truth_individuals),
        **evals,
        "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }
    (out / "record.json").write_text(json.dumps(rec, indent=2, default=str))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10, 50, 100, 200, 500])
    ap.add_argument("--samplers", nargs="+", default=["nutpie", "pymc"])
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--tune", type=int, default=1000)
    ap.add_argument("--chains", type=int, default=2)
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--out", type=Path, default=None)
    ap.add_argument("--child", nargs=3, metavar=("N", "SAMPLER", "OUT"), help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    if a.child:
        n, s, o = a.child
        child(int(n), s, a.draws, a.tune, a.chains, a.seed, Path(o))
        return 0
    out = a.out or Path(tempfile.mkdtemp(prefix="nstress_scaling_"))
    out.mkdir(parents=True, exist_ok=True)
    recs = []
    for n in a.sizes:
        for s in a.samplers:
            sub = out / f"n{n}_{s}"
            cmd = [sys.executable, __file__, "--draws", str(a.draws), "--tune", str(a.tune)]
            cmd += [
                "--chains",
                str(a.chains),
                "--seed",
                str(a.seed),
                "--child",
                str(n),
                s,
                str(sub),
            ]
            r = subprocess.run(cmd)
            if r.returncode != 0:
                recs.append({"n": n, "sampler": s, "error": f"exit {r.returncode}"})
            else:
                recs.append(json.loads((sub / "record.json").read_text()))
            (out / "scaling.json").write_text(json.dumps(recs, indent=2, default=str))
    print(
        f"{'n':>4} {'sampler':8} {'wall s':>7} {'compile':>7} {'grad/s':>7} {'us/grad/an':>10} "
        f"{'R-hat':>6} {'ESS':>6} {'ESS/s':>6} {'div':>4} {'MB':>6} {'lp+g ms':>7} {'np ms':>6} "
        f"{'AUC':>5}"
    )
    for r in recs:
        if "error" in r:
            print(f"{r['n']:4d} {r['sampler']:8} {r['error']}")
            continue
        print(
            f"{r['n']:4d} {r['sampler']:8} {r['wall_s']:7.0f} {r['compile_s'] or 0:7.1f} "
            f"{r['gradients_per_s'] or 0:7.0f} {1e6 * (r['s_per_gradient_per_animal'] or 0):10.1f} "
            f"{r['rhat_max']:6.3f} {r['ess_bulk_min']:6.0f} {r['ess_per_s']:6.2f} "
            f"{r['divergences']:4d} {r['peak_rss_mb']:6.0f} {r.get('logp_grad_ms', 0):7.2f} "
            f"{r['numpy_loglik_ms']:6.2f} {r['recovery'].get('auc_bins', float('nan')):5.3f}"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
