"""Figures of a fit, drawn from the product tables (matplotlib, Agg backend).

Every function takes plain tables (the files of a fit directory, as
DataFrames) or arrays and returns a :class:`matplotlib.figure.Figure`;
:func:`save_figure` writes it as PNG (for the report) and SVG (for
publication). Every axis carries its unit.

Colours: the eight-colour palette of Okabe & Ito (2008, "Color Universal
Design"), distinguishable with the common colour-vision deficiencies; the
P(catabolic) shading uses matplotlib's ``cividis`` map, designed to read the
same with and without red–green deficiency (Nuñez, Anderton & Renslow 2018).
Statuses also differ by marker shape, so nothing relies on colour alone.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.dates as mdates  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from nstress.atomic import atomic_write  # noqa: E402

# Okabe & Ito (2008) colour-blind-safe palette
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
GREY = "#8C8C8C"
STATUS_STYLE = {
    "catabolic": (OKABE_ITO["vermillion"], "o"),
    "possible": (OKABE_ITO["orange"], "D"),
    "cannot_tell": (OKABE_ITO["sky_blue"], "s"),
    "fit_failed": (GREY, "x"),
    "clear": (OKABE_ITO["bluish_green"], "^"),
}
TISSUE_COLOURS = [
    OKABE_ITO["blue"],
    OKABE_ITO["reddish_purple"],
    OKABE_ITO["bluish_green"],
    OKABE_ITO["orange"],
    OKABE_ITO["vermillion"],
    OKABE_ITO["sky_blue"],
    OKABE_ITO["black"],
]
SEQUENTIAL = "cividis"
LABEL = {
    "d15N": "δ¹⁵N (‰ vs AIR)",
    "d13C": "δ¹³C (‰ vs VPDB)",
    "date": "date (ISO 8601, day)",
    "p": "P(catabolic) (probability)",
    "enrichment": "catabolic enrichment δ¹⁵N (‰)",
}
# units of the hyperparameters shown in trace plots
PARAM_UNITS = {
    "p_episode_group": "probability",
    "gamma": "‰ δ¹³C per ‰ δ¹⁵N",
    "onset_sd": "d",
    "walk_sd": "‰ per knot",
    "walk_corr": "correlation",
    "kappa_log_mean": "log(‰/d)",
    "duration_log_mean": "log(d)",
    "tau_rec_log_mean": "log(d)",
    "half_life": "d",
    "discrimination": "‰",
    "extra_sd": "‰",
}
DPI = 110


def tissue_colours(tissues: list[str]) -> dict[str, str]:
    """Return a fixed colour per tissue name (sorted order, so every figure agrees)."""
    return {t: TISSUE_COLOURS[i % len(TISSUE_COLOURS)] for i, t in enumerate(sorted(tissues))}


def save_figure(fig: Figure, out_dir: Path, stem: str) -> dict[str, Path]:
    """Write ``fig`` as ``stem.png`` and ``stem.svg`` into ``out_dir`` (atomically) and close it.

    Returns
    -------
    dict
        ``{"png": path, "svg": path}``.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = {}
    for ext in ("png", "svg"):
        path = out_dir / f"{stem}.{ext}"
        atomic_write(path, lambda p, ext=ext: fig.savefig(p, format=ext, dpi=DPI))
        paths[ext] = path
    plt.close(fig)
    return paths


def _dates(s: pd.Series) -> np.ndarray:
    return pd.to_datetime(s).to_numpy()


def _date_axis(ax) -> None:
    ax.xaxis.set_major_locator(mdates.AutoDateLocator(maxticks=7))
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%Y-%m-%d"))
    ax.set_xlabel(LABEL["date"])


def individual_figure(
    individual: str,
    predictions: pd.DataFrame | None,
    timelines: pd.DataFrame,
    status: str = "",
) -> Figure:
    """One animal: observed δ15N and δ13C by tissue with fitted curves, P(catabolic), enrichment.

    Parameters
    ----------
    individual
        The animal's id (title).
    predictions
        Its rows of ``predictions.csv`` (observed, expected mean and 90 %
        band per observation); ``None`` draws the timelines only.
    timelines
        Its rows of ``timelines.csv``.
    status
        Its screening status (title).
    """
    fig, axes = plt.subplots(
        4, 1, figsize=(8.0, 8.2), sharex=True, gridspec_kw={"height_ratios": [3, 3, 1.2, 2]}
    )
    tl = timelines.sort_values("date")
    tdates = _dates(tl["date"])
    pr = predictions if predictions is not None else pd.DataFrame()
    colours = tissue_colours(list(pr["tissue"].unique()) if len(pr) else [])
    for ax, iso in zip(axes[:2], ("d15N", "d13C"), strict=True):
        sub = pr[pr["isotope"] == iso] if len(pr) else pr
        for tissue, g in sub.groupby("tissue") if len(sub) else []:
            g = g.sort_values("day_since_start")
            x = _dates(g["date"])
            c = colours[tissue]
            ax.fill_between(x, g["expected_lo"], g["expected_hi"], color=c, alpha=0.25, lw=0)
            ax.plot(x, g["expected_mean"], color=c, lw=1.4, label=f"{tissue} fitted (90 % band)")
            ax.plot(
                x,
                g["observed"],
                ls="none",
                marker="o",
                ms=3.5,
                mfc="white",
                mec=c,
                label=f"{tissue} observed",
            )
        diet = tl[f"diet_{iso}_mean"]
        ax.plot(tdates, diet, color=GREY, lw=1.0, ls="--", label="diet (mean, before Δ)")
        ax.set_ylabel(LABEL[iso])
        ax.grid(alpha=0.3)
    axes[0].legend(fontsize=7, ncol=2, loc="best", frameon=False)
    ax = axes[2]
    ax.fill_between(
        tdates, 0, tl["p_catabolic"], color=OKABE_ITO["vermillion"], alpha=0.6, step="mid", lw=0
    )
    ax.set_ylim(0, 1)
    ax.set_ylabel("P(catabolic)\n(probability)", fontsize=8)
    ax.grid(alpha=0.3)
    ax = axes[3]
    ax.fill_between(
        tdates,
        tl["enrichment_d15N_lo"],
        tl["enrichment_d15N_hi"],
        color=OKABE_ITO["blue"],
        alpha=0.25,
        lw=0,
        label="90 % interval",
    )
    ax.plot(tdates, tl["enrichment_d15N_mean"], color=OKABE_ITO["blue"], lw=1.4, label="mean")
    ax.set_ylabel("enrichment\nδ¹⁵N (‰)", fontsize=8)
    ax.legend(fontsize=7, frameon=False)
    ax.grid(alpha=0.3)
    _date_axis(ax)
    fig.suptitle(f"{individual}" + (f" — {status}" if status else ""), fontsize=11)
    fig.tight_layout()
    return fig


def _sorted_animals(screening: pd.DataFrame) -> pd.DataFrame:
    return screening.sort_values(["group", "rank"], kind="stable").reset_index(drop=True)


def colony_overview(timelines: pd.DataFrame, screening: pd.DataFrame) -> Figure:
    """Individuals × date shaded by P(catabolic), grouped by group and ranked within it."""
    sc = _sorted_animals(screening)
    n = len(sc)
    fig, ax = plt.subplots(figsize=(9.0, 1.2 + 0.28 * max(n, 3)))
    by_ind = {k: g.sort_values("date") for k, g in timelines.groupby("individual")}
    mesh = None
    width = None
    for row, ind in enumerate(sc["individual"]):
        g = by_ind.get(ind)
        if g is None or g.empty:
            continue
        x = _dates(g["date"])
        width = np.median(np.diff(x)) if x.size > 1 else np.timedelta64(4, "D")
        edges = np.r_[x - width / 2, x[-1] + width / 2]
        mesh = ax.pcolormesh(
            edges,
            [row, row + 1],
            g["p_catabolic"].to_numpy()[None, :],
            cmap=SEQUENTIAL,
            vmin=0,
            vmax=1,
            shading="flat",
        )
    groups = sc["group"].to_numpy()
    for row in np.flatnonzero(groups[1:] != groups[:-1]) + 1:
        ax.axhline(row, color="white", lw=2.5)
    for gname in dict.fromkeys(groups):
        rows = np.flatnonzero(groups == gname)
        ax.text(
            1.01,
            1 - (rows.mean() + 0.5) / max(n, 1),
            str(gname),
            transform=ax.transAxes,
            rotation=90,
            va="center",
            fontsize=8,
        )
    ax.set_yticks(np.arange(n) + 0.5)
    ax.set_yticklabels(sc["individual"], fontsize=7)
    ax.set_ylim(n, 0)
    ax.set_ylabel("individual (id; by group, ranked)")
    _date_axis(ax)
    if mesh is not None:
        cb = fig.colorbar(mesh, ax=ax, pad=0.05)
        cb.set_label(LABEL["p"])
    ax.set_title("Colony overview: P(catabolic) per animal and date", fontsize=10)
    fig.tight_layout()
    return fig


def ranking_figure(screening: pd.DataFrame) -> Figure:
    """Screening ranking: P(episode) and peak enrichment with 90 % intervals, by status."""
    sc = screening.sort_values("rank").reset_index(drop=True)
    n = len(sc)
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(9.0, 1.2 + 0.26 * max(n, 3)), sharey=True)
    y = np.arange(n)
    for status, (colour, marker) in STATUS_STYLE.items():
        m = (sc["status"] == status).to_numpy()
        if not m.any():
            continue
        for ax, col in ((a1, "p_catabolic_any"), (a2, "peak_enrichment_d15N")):
            mean = sc[col if col == "p_catabolic_any" else f"{col}_mean"].to_numpy()[m]
            lo = sc[f"{col}_lo"].to_numpy()[m]
            hi = sc[f"{col}_hi"].to_numpy()[m]
            ax.errorbar(
                mean,
                y[m],
                xerr=[np.maximum(mean - lo, 0), np.maximum(hi - mean, 0)],
                fmt=marker,
                color=colour,
                ms=5,
                capsize=2,
                lw=1,
                label=status,
            )
    a1.set_yticks(y)
    a1.set_yticklabels(sc["individual"], fontsize=7)
    a1.set_ylim(n - 0.5, -0.5)
    a1.set_xlim(-0.02, 1.02)
    a1.set_xlabel("P(episode) (probability; 90 % interval)")
    a1.set_ylabel("individual (id; screening rank)")
    a2.set_xlabel("peak enrichment δ¹⁵N (‰; 90 % interval)")
    for ax in (a1, a2):
        ax.grid(alpha=0.3, axis="x")
    a1.legend(fontsize=7, frameon=False, loc="lower right")
    fig.suptitle("Screening ranking", fontsize=10)
    fig.tight_layout()
    return fig


def direction_vectors(
    gamma: float, walk_sd: np.ndarray | None, walk_corr: float | None
) -> tuple[np.ndarray, np.ndarray | None]:
    """Return unit (δ13C, δ15N) directions: catabolism (γ, 1) and the diet's main axis.

    The diet direction is the leading eigenvector of the diet-increment
    covariance diag(sd)·R·diag(sd) (R the N–C correlation), oriented with
    rising δ15N; ``None`` without the walk's scales.
    """
    cat = np.array([gamma, 1.0])
    cat /= np.linalg.norm(cat)
    if walk_sd is None or walk_corr is None:
        return cat, None
    sn, sc = float(walk_sd[0]), float(walk_sd[1])
    cov_nc = np.array([[sn**2, walk_corr * sn * sc], [walk_corr * sn * sc, sc**2]])
    w, v = np.linalg.eigh(cov_nc)
    lead = v[:, np.argmax(w)]  # (N, C)
    diet = np.array([lead[1], lead[0]])
    if diet[1] < 0:
        diet = -diet
    return cat, diet / np.linalg.norm(diet)


def isotope_plane(
    timelines: pd.DataFrame,
    screening: pd.DataFrame,
    gamma: dict[str, float],
    walk_sd: np.ndarray | None = None,
    walk_corr: float | None = None,
) -> Figure:
    """Each animal's body-pool path in the δ13C–δ15N plane, with the catabolic and diet directions.

    The path is the posterior-mean body pool P = D + E·(1, γ) per bin (diet
    plus the catabolic enrichment); γ is the group's posterior mean.
    """
    fig, ax = plt.subplots(figsize=(7.0, 6.0))
    status = dict(zip(screening["individual"], screening["status"], strict=False))
    seen: set[str] = set()
    for ind, g in timelines.groupby("individual"):
        g = g.sort_values("date")
        gm = gamma.get(str(g["group"].iloc[0]), float(np.mean(list(gamma.values()) or [0.0])))
        e = g["enrichment_d15N_mean"].to_numpy()
        x = g["diet_d13C_mean"].to_numpy() + gm * e
        y = g["diet_d15N_mean"].to_numpy() + e
        st = status.get(ind, "clear")
        colour, marker = STATUS_STYLE.get(st, (GREY, "."))
        label = st if st not in seen else None
        seen.add(st)
        ax.plot(x, y, color=colour, lw=1.0, alpha=0.8, label=label)
        ax.plot(x[-1], y[-1], marker=marker, color=colour, ms=4)
    cx = timelines["diet_d13C_mean"].mean()
    cy = timelines["diet_d15N_mean"].mean()
    gbar = float(np.mean(list(gamma.values()))) if gamma else 0.0
    cat, diet = direction_vectors(gbar, walk_sd, walk_corr)
    span = 0.25 * max(np.ptp(timelines["diet_d15N_mean"]), np.ptp(timelines["diet_d13C_mean"]), 1)
    ax.annotate(
        "",
        xy=(cx + span * cat[0], cy + span * cat[1]),
        xytext=(cx, cy),
        arrowprops={"arrowstyle": "-|>", "color": OKABE_ITO["black"], "lw": 2},
    )
    ax.text(
        cx + span * cat[0],
        cy + span * cat[1],
        f" catabolic (1, γ={gbar:.2f})",
        fontsize=8,
        clip_on=True,
    )
    if diet is not None:
        ax.annotate(
            "",
            xy=(cx + span * diet[0], cy + span * diet[1]),
            xytext=(cx, cy),
            arrowprops={"arrowstyle": "-|>", "color": OKABE_ITO["blue"], "lw": 2, "ls": "--"},
        )
        ax.text(
            cx + span * diet[0],
            cy + span * diet[1],
            " diet (main axis)",
            fontsize=8,
            color=OKABE_ITO["blue"],
            clip_on=True,
        )
    ax.set_xlabel(LABEL["d13C"])
    ax.set_ylabel(LABEL["d15N"])
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, frameon=False, title="status", title_fontsize=7)
    ax.set_title("Body-pool paths: catabolic direction against the diet direction", fontsize=10)
    fig.tight_layout()
    return fig


def trace_figure(arrays: dict[str, np.ndarray]) -> Figure:
    """Trace and rank plots of scalar quantities, each ``(chain, draw)``.

    Left: the draws of each chain. Right: the histogram of each chain's ranks
    among all draws; well-mixed chains give flat, overlapping histograms.
    """
    names = list(arrays)
    k = max(len(names), 1)
    fig, axes = plt.subplots(k, 2, figsize=(9.0, 1.7 * k + 0.6), squeeze=False)
    for row, name in enumerate(names):
        a = np.asarray(arrays[name], dtype=float)
        n_chain, n_draw = a.shape
        ranks = np.argsort(np.argsort(a.ravel())).reshape(a.shape)
        bins = np.linspace(0, a.size, min(20, max(n_draw // 5, 2)) + 1)
        unit = PARAM_UNITS.get(name.split("[")[0], "")
        for c in range(n_chain):
            colour = TISSUE_COLOURS[c % len(TISSUE_COLOURS)]
            axes[row, 0].plot(np.arange(n_draw), a[c], lw=0.7, color=colour, alpha=0.8)
            axes[row, 1].hist(ranks[c], bins=bins, histtype="step", color=colour, lw=1.2)
        axes[row, 0].set_ylabel(f"{name}\n({unit})" if unit else name, fontsize=7)
        axes[row, 1].set_ylabel("count (draws)", fontsize=7)
        axes[row, 0].set_xlabel("draw (iteration after tuning, draws)", fontsize=7)
        axes[row, 1].set_xlabel("rank among all chains' draws (rank)", fontsize=7)
        for ax in axes[row]:
            ax.tick_params(labelsize=7)
    fig.suptitle("Trace (left) and rank (right) plots, one colour per chain", fontsize=10)
    fig.tight_layout()
    return fig


def ppc_figure(predictions: pd.DataFrame) -> Figure:
    """Posterior predictive checks per tissue and isotope: observed against predicted.

    Each point is one measurement with its 90 % posterior predictive
    interval; the panel title gives the share of measurements inside it.
    """
    keys = sorted(predictions.groupby(["tissue", "isotope"]).groups)
    tissues = sorted({t for t, _ in keys})
    fig, axes = plt.subplots(
        max(len(tissues), 1), 2, figsize=(8.0, 3.0 * max(len(tissues), 1)), squeeze=False
    )
    colours = tissue_colours(tissues)
    for r, tissue in enumerate(tissues):
        for c, iso in enumerate(("d15N", "d13C")):
            ax = axes[r, c]
            g = predictions[(predictions["tissue"] == tissue) & (predictions["isotope"] == iso)]
            ax.set_xlabel(f"observed {LABEL[iso]}", fontsize=8)
            ax.set_ylabel(f"predicted {LABEL[iso]}", fontsize=8)
            if g.empty:
                ax.set_title(f"{tissue} {iso}: no data", fontsize=8)
                continue
            inside = (g["observed"] >= g["predictive_lo"]) & (g["observed"] <= g["predictive_hi"])
            mid = 0.5 * (g["predictive_lo"] + g["predictive_hi"])
            ax.errorbar(
                g["observed"],
                mid,
                yerr=[mid - g["predictive_lo"], g["predictive_hi"] - mid],
                fmt="o",
                ms=2.5,
                lw=0.6,
                color=colours[tissue],
                alpha=0.7,
            )
            lims = [
                min(g["observed"].min(), g["predictive_lo"].min()),
                max(g["observed"].max(), g["predictive_hi"].max()),
            ]
            ax.plot(lims, lims, color=GREY, lw=1, ls="--")
            ax.set_title(
                f"{tissue} {iso}: {inside.mean():.0%} inside the 90 % interval (n = {len(g)})",
                fontsize=8,
            )
            ax.tick_params(labelsize=7)
            ax.grid(alpha=0.3)
    fig.suptitle("Posterior predictive checks", fontsize=10)
    fig.tight_layout()
    return fig


def onset_figure(screening: pd.DataFrame) -> Figure:
    """Onset dates of the animals with evidence of an episode, per group, with 90 % intervals."""
    ev = screening[screening["status"].isin(["catabolic", "possible"])].copy()
    ev = ev.dropna(subset=["onset_date"]).sort_values(["group", "onset_date"])
    fig, ax = plt.subplots(figsize=(8.0, 1.4 + 0.25 * max(len(ev), 3)))
    y = np.arange(len(ev))
    if len(ev):
        on = _dates(ev["onset_date"])
        lo = pd.to_datetime(ev["onset_date_lo"]).fillna(pd.to_datetime(ev["onset_date"]))
        hi = pd.to_datetime(ev["onset_date_hi"]).fillna(pd.to_datetime(ev["onset_date"]))
        for st in ("catabolic", "possible"):
            m = (ev["status"] == st).to_numpy()
            colour, marker = STATUS_STYLE[st]
            ax.hlines(y[m], lo.to_numpy()[m], hi.to_numpy()[m], color=colour, lw=1.5)
            ax.plot(on[m], y[m], marker, color=colour, ls="none", label=st)
        ax.set_yticks(y)
        ax.set_yticklabels(
            [f"{i} ({g})" for i, g in zip(ev["individual"], ev["group"], strict=True)], fontsize=7
        )
        ax.legend(fontsize=7, frameon=False)
    else:
        ax.text(
            0.5, 0.5, "no animal with evidence of an episode", ha="center", transform=ax.transAxes
        )
        ax.set_yticks([])
    ax.set_ylabel("individual (id, group)")
    _date_axis(ax)
    ax.grid(alpha=0.3, axis="x")
    ax.set_title("Onset of episodes (median and 90 % interval)", fontsize=10)
    fig.tight_layout()
    return fig


def power_figure(table: pd.DataFrame, power: float = 0.8, approximate: bool = True) -> Figure:
    """Plot detection probability and onset error of a power analysis (``nstress power``).

    Parameters
    ----------
    table
        One row per sampling design × fast scenario (``segment_mm``,
        ``draw_interval_days``, ``fast_days``, ``rate_per_day``, ``detected``,
        ``detected_lo90``, ``detected_hi90``, ``onset_error_median_days``).
    power
        Detection share drawn as the reference line.
    approximate
        Say in the title that the fits were the fast approximate mode.

    Returns
    -------
    matplotlib.figure.Figure
        Columns: blood-draw intervals. Top: share of fasting animals
        detected (90 % interval as error bars); bottom: median onset error.
        The x axis is the segment length when several were simulated, else
        the fast length; lines are the other scenario values (colour and
        marker both differ, so nothing relies on colour alone).
    """
    intervals = sorted(table["draw_interval_days"].unique())
    by_segment = table["segment_mm"].nunique() > 1
    x_col, x_label = (
        ("segment_mm", "segment length (mm)") if by_segment else ("fast_days", "fast length (d)")
    )
    line_keys = ["fast_days", "rate_per_day"] if by_segment else ["segment_mm", "rate_per_day"]
    fig, axes = plt.subplots(
        2, len(intervals), figsize=(4.2 * len(intervals) + 1.8, 6.2), squeeze=False, sharex=True
    )
    markers = ["o", "s", "^", "D", "v", "P", "X", "*"]
    lines = table[line_keys].drop_duplicates().sort_values(line_keys).to_numpy()
    for c, interval in enumerate(intervals):
        sub = table[table["draw_interval_days"] == interval]
        top, bottom = axes[0, c], axes[1, c]
        for n, key in enumerate(lines):
            g = sub[(sub[line_keys[0]] == key[0]) & (sub[line_keys[1]] == key[1])].sort_values(
                x_col
            )
            if not len(g):
                continue
            colour = TISSUE_COLOURS[n % len(TISSUE_COLOURS)]
            marker = markers[n % len(markers)]
            label = (
                f"{key[0]:g} d fast, {key[1]:g} ‰/d"
                if by_segment
                else f"{key[0]:g} mm segments, {key[1]:g} ‰/d"
            )
            yerr = np.vstack(
                [g["detected"] - g["detected_lo90"], g["detected_hi90"] - g["detected"]]
            )
            top.errorbar(
                g[x_col],
                g["detected"],
                yerr=yerr,
                color=colour,
                marker=marker,
                lw=1.3,
                capsize=3,
                label=label,
            )
            bottom.plot(g[x_col], g["onset_error_median_days"], color=colour, marker=marker, lw=1.3)
        top.axhline(power, color=GREY, ls="--", lw=1.0)
        top.set_ylim(-0.03, 1.03)
        top.set_title(
            f"blood every {interval:g} d" if interval else "keratin only (no blood)", fontsize=10
        )
        top.grid(alpha=0.3)
        bottom.grid(alpha=0.3)
        bottom.set_xlabel(x_label)
        bottom.set_ylim(bottom=0)
    axes[0, 0].set_ylabel(f"fasts detected (share; dashed: {power:.0%})")
    axes[1, 0].set_ylabel("median onset error (d)")
    axes[0, -1].legend(fontsize=7, frameon=False, loc="center left", bbox_to_anchor=(1.02, 0.5))
    what = "approximate fast screening fits" if approximate else "full NUTS fits"
    fig.suptitle(f"Power of the sampling design (simulated animals, {what})", fontsize=10)
    fig.tight_layout()
    return fig
