"""``report.html``: one self-contained page rendered from the files of fit directories.

:func:`write_report` reads only files (``manifest.json``, ``screening.csv``,
``timelines.csv``, ``predictions.csv``, ``colony_summary.csv``,
``trophic_position.csv`` when amino-acid data exist, ``posterior.nc``), so
a report can be rendered again later without refitting, and the units of one
run merge into one report. Figures go to
``out_dir/figures/`` (PNG and SVG); the page embeds the PNGs as base64 and
needs no network: no external styles, scripts or fonts.
"""

from __future__ import annotations

import base64
import html
import json
import re
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from nstress import __version__
from nstress.aminoacids import FOOD_WEBS
from nstress.atomic import atomic_write_text
from nstress.errors import InputError
from nstress.model import posterior as post
from nstress.model.priors import resolve_priors
from nstress.presets import format_value
from nstress.products import figures as figs
from nstress.products.screening import STATUSES, colony_summary
from nstress.tissues import resolve_tissues

TRACE_PARAMS = (
    "p_episode_group",
    "gamma",
    "onset_sd",
    "kappa_log_mean",
    "duration_log_mean",
    "walk_sd",
)
MAX_TRACES = 10
CAUTIONS = (
    "<b>A screening flag is not a diagnosis.</b> It says where the isotopes point. Decisions "
    "about animals (intervention, supplementary feeding, management) defer to licensed "
    "veterinary practice, field observation and local rules.",
    "<b>Sampling animals needs permits and ethics approval.</b> Capture, restraint, whisker or "
    "feather removal and blood draws follow your institution's animal-ethics board, your permits "
    "and trained handlers; nstress does not tell you how or how often to sample an animal.",
    "<b>Lipid-extraction solvents are hazardous</b> (e.g. chloroform–methanol, petroleum "
    "ether): use them in a fume hood with the protective equipment and waste handling your "
    "laboratory's safety rules require.",
)
STATUS_TEXT = {
    "catabolic": "confident catabolic episode",
    "possible": "some evidence, not enough",
    "clear": "no episode",
    "cannot_tell": "the data cannot tell",
    "fit_failed": "fit failed its diagnostics",
}
EXTRA_REFERENCES = (
    "Wilson 1927 (score interval of a proportion)",
    "Newcombe 1998 (comparison of intervals for a proportion)",
    "Brown, Cai & DasGupta 2001 (interval estimation for a binomial proportion)",
    "Okabe & Ito 2008 (colour-blind-safe palette)",
    "Nuñez, Anderton & Renslow 2018 (cividis colour map)",
)


@dataclass
class FitFiles:
    """The files of one fit directory, read."""

    unit: str
    path: Path
    manifest: dict[str, Any]
    screening: pd.DataFrame
    timelines: pd.DataFrame
    predictions: pd.DataFrame | None
    colony: pd.DataFrame
    traces: dict[str, np.ndarray] = field(default_factory=dict)
    gamma: dict[str, float] = field(default_factory=dict)
    walk_sd: np.ndarray | None = None
    walk_corr: float | None = None
    trophic: pd.DataFrame | None = None


def _read_csv(path: Path, required: bool = True) -> pd.DataFrame | None:
    if not path.exists():
        if required:
            raise InputError("missing file of a fit directory", file=str(path))
        return None
    try:
        return pd.read_csv(path, dtype={"individual": str, "group": str})
    except Exception as exc:  # noqa: BLE001 - any reader failure means an unusable file
        raise InputError(f"cannot read ({type(exc).__name__}: {exc})", file=str(path)) from None


def read_fit_dir(path: Path, unit: str | None = None) -> FitFiles:
    """Read the files of one finished fit directory.

    Parameters
    ----------
    path
        The directory (``manifest.json`` marks it finished).
    unit
        Label of the unit in a merged report (default: the directory name).

    Raises
    ------
    InputError
        A required file is missing or unreadable (the message names it).
    """
    path = Path(path)
    mpath = path / "manifest.json"
    if not mpath.exists():
        raise InputError("not a finished fit directory (no manifest.json)", file=str(path))
    try:
        manifest = json.loads(mpath.read_text())
    except json.JSONDecodeError as exc:
        raise InputError(f"cannot read manifest ({exc})", file=str(mpath)) from None
    screening = _read_csv(path / "screening.csv")
    timelines = _read_csv(path / "timelines.csv")
    predictions = _read_csv(path / "predictions.csv", required=False)
    colony = _read_csv(path / "colony_summary.csv", required=False)
    if colony is None or "share_flagged" not in colony:
        colony = colony_summary(screening)
    ff = FitFiles(
        unit=unit or path.resolve().name,
        path=path,
        manifest=manifest,
        screening=screening,
        timelines=timelines,
        predictions=predictions,
        colony=colony,
        trophic=_read_csv(path / "trophic_position.csv", required=False),
    )
    if (path / "posterior.nc").exists():
        idata, _ = post.load(path / "posterior.nc")
        _read_posterior(ff, idata)
    return ff


def _read_posterior(ff: FitFiles, idata: Any) -> None:
    """Key hyperparameters' draws (trace plots), γ per group and the diet walk's scales."""
    pos = idata.posterior
    for name in TRACE_PARAMS:
        if not post.has_var(idata, name):
            continue
        da = pos[name]
        a = post.var(idata, name)
        extra = [d for d in da.dims if d not in ("chain", "draw")]
        flat = a.reshape(a.shape[0], a.shape[1], -1)
        labels = (
            [str(x) for x in pos[extra[0]].values]
            if len(extra) == 1 and extra[0] in pos.coords
            else [str(i) for i in range(flat.shape[2])]
        )
        for j in range(flat.shape[2]):
            if len(ff.traces) >= MAX_TRACES:
                break
            key = name if flat.shape[2] == 1 else f"{name}[{labels[j]}]"
            ff.traces[key] = flat[:, :, j]
    if post.has_var(idata, "gamma"):
        g = post.var(idata, "gamma")
        groups = [str(x) for x in pos["gamma"].coords.get("group", range(g.shape[2])).values]
        ff.gamma = {grp: float(g[:, :, k].mean()) for k, grp in enumerate(groups)}
    if post.has_var(idata, "walk_sd") and post.has_var(idata, "walk_corr"):
        ff.walk_sd = post.var(idata, "walk_sd").reshape(-1, 2).mean(0)
        ff.walk_corr = float(post.var(idata, "walk_corr").mean())


# ---------------------------------------------------------------------------- helpers


def _e(x: Any) -> str:
    return html.escape("" if x is None or (isinstance(x, float) and np.isnan(x)) else str(x))


def _num(x: Any, fmt: str = "{:.2f}") -> str:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return ""
    return "" if not np.isfinite(v) else fmt.format(v)


def _img(png: Path, alt: str) -> str:
    data = base64.b64encode(Path(png).read_bytes()).decode("ascii")
    return f'<img alt="{_e(alt)}" src="data:image/png;base64,{data}">'


def _slug(s: str, used: set[str]) -> str:
    base = re.sub(r"[^A-Za-z0-9_.-]+", "_", s).strip("_") or "x"
    out, k = base, 1
    while out in used:
        k += 1
        out = f"{base}_{k}"
    used.add(out)
    return out


def _table(frame: pd.DataFrame, cls: str = "") -> str:
    head = "".join(f"<th>{_e(c)}</th>" for c in frame.columns)
    body = "".join(
        "<tr>" + "".join(f"<td>{_e(v)}</td>" for v in row) + "</tr>"
        for row in frame.itertuples(index=False)
    )
    return f'<table class="{cls}"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def _interval(row: pd.Series, col: str, fmt: str = "{:.2f}", mean: str | None = None) -> str:
    m = _num(row.get(mean or f"{col}_mean"), fmt)
    lo, hi = _num(row.get(f"{col}_lo"), fmt), _num(row.get(f"{col}_hi"), fmt)
    return f"{m} [{lo}–{hi}]" if m and lo else m


# ---------------------------------------------------------------------------- sections


def _summary(fits: list[FitFiles], sc: pd.DataFrame) -> str:
    counts = sc["status"].value_counts()
    cells = [
        ("animals", len(sc)),
        ("flagged (catabolic)", int(counts.get("catabolic", 0))),
        ("possible", int(counts.get("possible", 0))),
        ("inconclusive (cannot tell)", int(counts.get("cannot_tell", 0))),
        ("fit failed", int(counts.get("fit_failed", 0))),
        ("clear", int(counts.get("clear", 0))),
    ]
    boxes = "".join(
        f'<div class="box"><div class="n">{n}</div><div>{_e(k)}</div></div>' for k, n in cells
    )
    warn = []
    for f in fits:
        d = f.manifest.get("diagnostics", {})
        if d.get("ok", False):
            continue
        reasons = d.get("reasons", [])
        items = "".join(f"<li>{_e(r)}</li>" for r in reasons[:8])
        more = f"<li>… and {len(reasons) - 8} more</li>" if len(reasons) > 8 else ""
        warn.append(
            f"<p><b>Unit {_e(f.unit)}: the fit failed its diagnostics</b> — every status "
            f"there reads <code>fit_failed</code>; nothing confident is said.</p>"
            f"<ul>{items}{more}</ul>"
        )
    diag = (
        '<div class="warn" id="diagnostics-warnings">' + "".join(warn) + "</div>"
        if warn
        else '<p class="ok" id="diagnostics-warnings">Diagnostics passed for every unit.</p>'
    )
    if not warn and any(f.manifest.get("approximate") for f in fits):
        diag = (
            '<p class="ok" id="diagnostics-warnings">Sanity checks of the approximation passed '
            "(optimiser at a mode, predictive coverage); these are not NUTS diagnostics.</p>"
        )
    return (
        f'<section id="summary"><h2>Summary</h2>{_approximate_banner(fits)}'
        f'<div class="boxes">{boxes}</div>{diag}</section>'
    )


APPROXIMATE_BANNER = "Approximate fast screening: not a final posterior."


def _approximate_banner(fits: list[FitFiles]) -> str:
    """Return a banner when any unit was fitted by the fast approximation."""
    units = [f.unit for f in fits if f.manifest.get("approximate")]
    if not units:
        return ""
    which = "every unit" if len(units) == len(fits) else "unit(s) " + ", ".join(map(str, units))
    return (
        f'<div class="warn" id="approximate-banner"><p><b>{_e(APPROXIMATE_BANNER)}</b> '
        f"{_e(which.capitalize())} fitted by MAP + Laplace approximation for first-pass "
        "screening; statuses are a screen, intervals are approximate, and R-hat/ESS do not "
        "apply. Refit the animals of interest with full NUTS (without --fast) before "
        "drawing conclusions.</p></div>"
    )


def _cautions() -> str:
    items = "".join(f"<li>{c}</li>" for c in CAUTIONS)
    return f'<section id="cautions" class="caution"><h2>Cautions</h2><ul>{items}</ul></section>'


def _screening_table(sc: pd.DataFrame, anchors: dict[str, str], multi: bool) -> str:
    cols = (
        ["rank", "individual", "group"]
        + (["unit"] if multi else [])
        + [
            "status",
            "P(episode) [90 %]",
            "catabolic days (d)",
            "peak enrichment δ15N (‰) [90 %]",
            "onset",
            "end",
            "body-N loss (fraction)",
            "samples",
            "tissues",
            "reason",
        ]
    )
    head = "".join(f'<th title="click to sort">{_e(c)}</th>' for c in cols)
    rows = []
    for _, r in sc.iterrows():
        link = f'<a href="#{anchors[r["uid"]]}">{_e(r["individual"])}</a>'
        cells = [(r["rank"], _e(r["rank"])), (r["individual"], link), (r["group"], _e(r["group"]))]
        if multi:
            cells.append((r["unit"], _e(r["unit"])))
        cells += [
            (
                list(STATUSES).index(r["status"]) if r["status"] in STATUSES else 9,
                f'<span class="st {_e(r["status"])}">{_e(r["status"])}</span>',
            ),
            (r["p_catabolic_any"], _interval(r, "p_catabolic_any", mean="p_catabolic_any")),
            (r["catabolic_days_mean"], _num(r["catabolic_days_mean"], "{:.0f}")),
            (r["peak_enrichment_d15N_mean"], _interval(r, "peak_enrichment_d15N")),
            (r.get("onset_date"), _e(r.get("onset_date"))),
            (r.get("end_date"), _e(r.get("end_date"))),
            (r.get("body_N_loss_mean"), _interval(r, "body_N_loss")),
            (r.get("n_samples"), _e(r.get("n_samples"))),
            (r.get("tissues"), _e(r.get("tissues"))),
            (r.get("status_reason"), _e(r.get("status_reason"))),
        ]
        tds = "".join(f'<td data-v="{_e(v)}">{h}</td>' for v, h in cells)
        rows.append(f"<tr>{tds}</tr>")
    return (
        '<section id="screening"><h2>Screening table</h2>'
        "<p>Click a column heading to sort. Statuses: "
        + "; ".join(f"<code>{s}</code> — {_e(t)}" for s, t in STATUS_TEXT.items())
        + '.</p><div class="scroll"><table id="screening-table" class="sortable">'
        f"<thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table></div></section>"
    )


def _colony(fits: list[FitFiles], pngs: dict[str, Path]) -> str:
    col = pd.concat([f.colony.assign(unit=f.unit) for f in fits], ignore_index=True)
    show = pd.DataFrame(
        {
            "unit": col["unit"],
            "group": col["group"],
            "animals": col["n_animals"],
            "flagged": col["n_catabolic"],
            "share flagged [90 % Wilson]": [
                f"{a:.2f} [{b:.2f}–{c:.2f}]"
                for a, b, c in zip(
                    col["share_flagged"],
                    col["share_flagged_lo"],
                    col["share_flagged_hi"],
                    strict=True,
                )
            ],
            "onsets (n)": col["onset_n"],
            "onset first / median / last": [
                " / ".join(_e(x) for x in t)
                for t in zip(
                    col["onset_first"], col["onset_median"], col["onset_last"], strict=True
                )
            ],
            "total catabolic days (d)": col["catabolic_days_total"].round(0),
        }
    )
    parts = [
        '<section id="colony"><h2>Colony</h2>',
        _table(show, "plain"),
        "<p>Share flagged: animals with status <code>catabolic</code> over all animals of the "
        "group, with the 90 % Wilson score interval (Wilson 1927; Newcombe 1998). Onsets: "
        "animals with status <code>catabolic</code> or <code>possible</code>.</p>",
    ]
    for key, alt in (
        ("overview", "colony overview: P(catabolic) by animal and date"),
        ("ranking", "screening ranking with intervals"),
        ("onsets", "onset dates of episodes"),
        ("plane", "d15N-d13C plane with body-pool paths"),
    ):
        if key in pngs:
            parts.append(f'<figure id="fig-{key}">{_img(pngs[key], alt)}</figure>')
    parts.append("</section>")
    return "".join(parts)


def _individuals(sc: pd.DataFrame, anchors: dict[str, str], pngs: dict[str, Path]) -> str:
    parts = ['<section id="individuals"><h2>Individuals</h2>']
    for _, r in sc.iterrows():
        uid = r["uid"]
        facts = {
            "group": r["group"],
            "status": f"{r['status']} — {r.get('status_reason', '')}",
            "P(episode) [90 %]": _interval(r, "p_catabolic_any", mean="p_catabolic_any"),
            "onset [90 %]": f"{_e(r.get('onset_date'))} [{_e(r.get('onset_date_lo'))} – "
            f"{_e(r.get('onset_date_hi'))}]",
            "end [90 %]": f"{_e(r.get('end_date'))} [{_e(r.get('end_date_lo'))} – "
            f"{_e(r.get('end_date_hi'))}]",
            "catabolic days (d)": _num(r.get("catabolic_days_mean"), "{:.0f}"),
            "peak enrichment δ15N (‰) [90 %]": _interval(r, "peak_enrichment_d15N"),
            "body-N loss (fraction, Rayleigh estimate) [90 %]": _interval(r, "body_N_loss"),
            "samples / δ13C values / tissues": f"{_e(r.get('n_samples'))} / "
            f"{_e(r.get('n_d13C'))} / {_e(r.get('tissues'))}",
            "diagnostics ok": _e(r.get("diagnostics_ok")),
        }
        dl = "".join(f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in facts.items())
        fig = _img(pngs[uid], f"timelines of {uid}") if uid in pngs else ""
        parts.append(
            f'<section class="individual" id="{anchors[uid]}"><h3>{_e(uid)} '
            f'<span class="st {_e(r["status"])}">{_e(r["status"])}</span></h3>'
            f"<dl>{dl}</dl><figure>{fig}</figure></section>"
        )
    parts.append("</section>")
    return "".join(parts)


PHE_MODE_TEXT = {
    "interpolate": "samples with Phe, and samples between two of them (interpolated)",
    "measured": "samples with Phe only",
    "off": "not used (phe_baseline = false)",
}


def _trophic(fits: list[FitFiles], sc: pd.DataFrame) -> tuple[str, list[str]]:
    """Trophic position per individual, when amino-acid data exist (and the sources cited)."""
    with_aa = [f for f in fits if f.trophic is not None and len(f.trophic)]
    if not with_aa or "trophic_position_median" not in sc:
        return "", []
    used = []
    for f in with_aa:
        t = f.trophic.iloc[0]
        aa = f.manifest.get("amino_acids", {})
        mode = PHE_MODE_TEXT.get(
            "off" if aa.get("phe_baseline") is False else str(aa.get("phe_mode", "")), ""
        )
        used.append(
            f"<li>unit {_e(f.unit)}: food web <code>{_e(t['food_web'])}</code>, "
            f"β = {_num(t['beta'])} ± {_num(t['beta_sd'])} ‰, "
            f"TDF = {_num(t['tdf'])} ± {_num(t['tdf_sd'])} ‰"
            + (f"; Phe baseline offsets: {_e(mode)}" if mode else "")
            + (f"; <strong>{_e(aa['fast_mode_note'])}</strong>" if aa.get("fast_mode_note") else "")
            + "</li>"
        )
    rows = sc[sc["n_aa_samples"].fillna(0) > 0]
    show = pd.DataFrame(
        {
            "individual": rows["uid"],
            "group": rows["group"],
            "samples with Glu and Phe": rows["n_aa_samples"].astype(int),
            "samples with Phe": rows["n_phe_samples"].fillna(0).astype(int),
            "TP median": [_num(v) for v in rows["trophic_position_median"]],
            "TP mean ± SD": [
                f"{_num(m)} ± {_num(d)}"
                for m, d in zip(
                    rows["trophic_position_mean"], rows["trophic_position_sd"], strict=True
                )
            ],
        }
    )
    webs = {str(f.trophic["food_web"].iloc[0]) for f in with_aa}
    cited = [v for w in webs if w in FOOD_WEBS for v in FOOD_WEBS[w].sources.values()]
    html_ = (
        '<section id="trophic"><h2>Trophic position (amino acids)</h2>'
        "<p>TP = (δ¹⁵N<sub>Glu</sub> − δ¹⁵N<sub>Phe</sub> − β)/TDF + 1 (Chikaraishi et al. "
        "2009), per sample in <code>trophic_position.csv</code>; the SD propagates the "
        "analytical SDs and those of β and TDF (delta method; β and TDF errors are shared by "
        "all samples of an animal). Values used:</p><ul>"
        + "".join(used)
        + "</ul><p>Phenylalanine also sets each sample's baseline offset of bulk δ¹⁵N in the "
        "model, so that a rise of the food web's baseline is not read as catabolism (this "
        "assumes Phe is not enriched by catabolism). A trophic position describes the "
        "animal's food; it is not a health statement.</p>" + _table(show, "plain") + "</section>"
    )
    return html_, cited


def _diagnostics(fits: list[FitFiles], pngs: dict[str, Path]) -> str:
    parts = ['<section id="diagnostics"><h2>Diagnostics</h2>']
    for f in fits:
        d = f.manifest.get("diagnostics", {})
        conv = pd.DataFrame(
            [
                {
                    "quantity": k,
                    "R-hat max": _num(v.get("rhat_max"), "{:.3f}"),
                    "bulk ESS min": _num(v.get("ess_bulk_min"), "{:.0f}"),
                    "tail ESS min": _num(v.get("ess_tail_min"), "{:.0f}"),
                    "size": v.get("size"),
                }
                for k, v in d.get("convergence", {}).items()
            ]
        )
        ppc = pd.DataFrame(
            [
                {
                    "tissue:isotope": k,
                    "n": v.get("n"),
                    "inside 90 % interval": _num(v.get("coverage90"), "{:.0%}"),
                    "mean z": _num(v.get("mean_z")),
                    "sd z": _num(v.get("sd_z")),
                }
                for k, v in d.get("ppc", {}).items()
            ]
        )
        sampler = ", ".join(f"{k} {v}" for k, v in d.get("sampler", {}).items())
        if d.get("method") == "fast":
            verdict = "fast-mode sanity checks " + ("passed" if d.get("ok") else "FAILED")
            parts.append(
                f"<h3>Unit {_e(f.unit)}: approximate ({_e(verdict)})</h3>"
                f"<p>{_e(' '.join(d.get('notes', [])))}. Optimiser: {_e(sampler)}.</p>"
            )
            if len(ppc):
                parts.append("<p>Posterior predictive checks (per tissue and isotope):</p>")
                parts.append(_table(ppc, "plain"))
            continue
        parts.append(
            f"<h3>Unit {_e(f.unit)}: {'passed' if d.get('ok') else 'FAILED'}</h3>"
            f"<p>Sampler: {_e(f.manifest.get('sampler'))}; {_e(sampler)}. Convergence was "
            f"judged on: {_e(', '.join(d.get('covered', [])))}.</p>"
        )
        if len(conv):
            parts.append(_table(conv, "plain"))
        if len(ppc):
            parts.append("<p>Posterior predictive checks (per tissue and isotope):</p>")
            parts.append(_table(ppc, "plain"))
        for key in (f"trace:{f.unit}", f"ppc:{f.unit}"):
            if key in pngs:
                parts.append(f"<figure>{_img(pngs[key], key)}</figure>")
    parts.append("</section>")
    return "".join(parts)


POWER_DIR = "power"
"""Sub-directory of a run (or of the report's directory) that holds a power analysis."""


def _power(out_dir: Path) -> str:
    """Render the detection limit of the data's sampling design (when a power analysis ran)."""
    parts = ['<section id="power"><h2>What this sampling design can detect</h2>']
    doc_path = Path(out_dir) / POWER_DIR / "power.json"
    if not doc_path.exists():
        parts.append(
            "<p>No power analysis in this run. Add a <code>[design]</code> section to the "
            "workflow file (or run <code>nstress power</code>) to learn how long and how strong "
            "a fast must be for this sampling design to detect it; a clear status is only as "
            "good as that limit.</p></section>"
        )
        return "".join(parts)
    doc = json.loads(doc_path.read_text())
    info, design = doc.get("info", {}), doc.get("design", {})
    observed = info.get("observed")
    if observed:
        seg = observed.get("segment_mm")
        blood = observed.get("draw_interval_days") or 0
        parts.append(
            "<p>The data's own design: "
            f"{_e(observed.get('keratin_tissue'))} cut into {_num(seg, '{:.2g}')} mm segments "
            f"(median; about {_num(seg / info['growth_mm_per_day'], '{:.0f}')} days each at "
            f"{_num(info.get('growth_mm_per_day'), '{:g}')} mm/d), "
            + (
                f"blood ({_e(', '.join(observed.get('blood_tissues', [])))}) drawn about every "
                f"{blood} days."
                if blood
                else "no serial blood."
            )
            + "</p>"
        )
    mode = (
        "approximate fast-screening fits (conservative next to full NUTS)"
        if info.get("approximate")
        else "full NUTS fits"
    )
    parts.append(
        f"<p>Simulated with the model's own equations: {design.get('animals')} fasting and "
        f"{design.get('controls')} non-fasting animals per scenario, {_e(mode)}; a fast counts "
        "as detected when the screening calls the animal catabolic.</p><ul>"
        + "".join(f"<li>{_e(t)}</li>" for t in doc.get("limits", []))
        + "</ul>"
    )
    table_path = doc_path.with_name("power.csv")
    if table_path.exists():
        t = pd.read_csv(table_path)
        shown = pd.DataFrame(
            {
                "segment (mm)": t["segment_mm"].map(lambda v: f"{v:g}"),
                "blood every (d)": t["draw_interval_days"].map(lambda v: f"{v:g}" if v else "-"),
                "fast (d)": t["fast_days"].map(lambda v: f"{v:g}"),
                "rate (‰/d)": t["rate_per_day"].map(lambda v: f"{v:g}"),
                "detected": [
                    f"{d:.0%} [{lo:.0%}–{hi:.0%}]"
                    for d, lo, hi in zip(
                        t["detected"], t["detected_lo90"], t["detected_hi90"], strict=True
                    )
                ],
                "onset error (d, median)": t["onset_error_median_days"].map(_num),
                "controls flagged": t["false_flag_share"].map(lambda v: _num(v, "{:.0%}")),
            }
        )
        parts.append(_table(shown, "plain"))
    png = doc_path.with_name("power.png")
    if png.exists():
        parts.append(f"<figure>{_img(png, 'power of the sampling design')}</figure>")
    parts.append(
        "<p>A fast shorter or weaker than this limit can go unseen: for such animals "
        "<em>clear</em> means “no detectable fast”, not “did not fast”.</p></section>"
    )
    return "".join(parts)


_EQUATIONS = """
<ul>
<li>Diet D(t) = (δ¹⁵N, δ¹³C) of assimilated food: an individual level (pooled within group) plus
a Gaussian random walk on knots with correlated δ¹⁵N/δ¹³C increments, plus at most one explicit
diet shift (a ramp of size (Δδ¹⁵N, Δδ¹³C) over one knot interval).</li>
<li>Catabolic enrichment in δ¹⁵N, in closed form: E(t) = κ·(t − t<sub>on</sub>) while
catabolic, then E decays as e<sup>−(t − t<sub>end</sub>)/τ</sup>; κ (‰/d) and τ (d) per animal,
pooled within group. P(episode) and the onset are summed out exactly.</li>
<li>Body pool: P<sub>N</sub> = D<sub>N</sub> + E; P<sub>C</sub> = D<sub>C</sub> + γ·E
(γ per group, sign not forced).</li>
<li>Blood tissue k: Y<sub>k</sub>(t) = Δ<sub>k</sub> + Σ<sub>u≤t</sub> w<sub>k</sub>(t − u)·P(u),
one-compartment weights w<sub>k</sub>(u) ∝ e<sup>−λ<sub>k</sub>u</sup>,
λ<sub>k</sub> = ln 2 / t½<sub>k</sub>.</li>
<li>Keratin: Y = Δ<sub>k</sub> + mean of P over the segment's growth window
[t<sub>c</sub> − (x + ℓ/2)/(r·g), t<sub>c</sub> − (x − ℓ/2)/(r·g)], r an uncertain growth
multiplier.</li>
<li>Observation: y ~ Normal(Y, √(sd² + σ<sub>k</sub>²)), sd the row's analytical SD.</li>
<li>Per bin: P(catabolic) = P(episode) × P(bin inside the episode | episode), from draws.</li>
<li>Body-N loss (an estimate with its assumptions): E = ε·ln f (Rayleigh), loss = 1 − f,
ε uncertain (prior below).</li>
</ul>
"""


def _params(p: dict[str, Any]) -> str:
    return ", ".join(
        f"{k} = {v:g}" if isinstance(v, int | float) else f"{k} = {v}"
        for k, v in p.items()
        if k not in ("dist", "doc", "source")
    )


def _methods(fits: list[FitFiles]) -> tuple[str, list[str]]:
    cfg = fits[0].manifest.get("config", {})
    priors = resolve_priors(cfg.get("priors") or {})
    prior_rows = pd.DataFrame(
        [
            {
                "prior": k,
                "distribution": v.get("dist"),
                "parameters": _params(v),
                "meaning": v.get("doc"),
                "source": v.get("source"),
            }
            for k, v in priors.items()
        ]
    )
    present = set()
    for f in fits:
        for t in f.screening.get("tissues", pd.Series(dtype=str)).dropna():
            present.update(str(t).split("+"))
    tissues = resolve_tissues(cfg.get("tissues") or {})
    tis_rows = []
    for name, t in tissues.items():
        if present and name not in present:
            continue
        tis_rows.append(
            {
                "tissue": name,
                "class": t.klass,
                "half-life (d)": "" if t.klass == "keratin" else f"{t.half_life_days:g}",
                "growth (mm/d)": f"{t.growth_mm_per_day:g}" if t.klass == "keratin" else "",
                "Δ15N, Δ13C (‰)": f"{t.disc_d15N:g}, {t.disc_d13C:g} (SD {t.disc_sd:g})",
                "sources": "; ".join(f"{k}: {v}" for k, v in t.sources.items()),
            }
        )
    texts = list(prior_rows["source"].astype(str)) + [r["sources"] for r in tis_rows]
    html_ = (
        '<section id="methods"><h2>Methods</h2><h3>Model</h3>'
        + _EQUATIONS
        + "<p>Sampling: NUTS (nutpie or PyMC); products from retained posterior draws. "
        "Intervals are 90 % (5 % to 95 % quantiles) unless stated.</p>"
        "<h3>Priors (with overrides of this run)</h3>"
        + _table(prior_rows, "plain")
        + "<h3>Tissue defaults</h3>"
        + _table(pd.DataFrame(tis_rows), "plain")
    )
    return html_, texts


def _preset_of(f: FitFiles) -> dict[str, Any] | None:
    """Return the preset record of a unit: the manifest's, else the hashed part in its config."""
    return f.manifest.get("preset") or f.manifest.get("config", {}).get("preset")


def _starting_values(fits: list[FitFiles]) -> tuple[str, list[str]]:
    """Return the "Starting values" section (the preset, what replaced its values) and sources."""
    groups: dict[str, tuple[dict[str, Any] | None, list[str]]] = {}
    for f in fits:
        rec = _preset_of(f)
        key = json.dumps(rec, sort_keys=True, default=str)
        groups.setdefault(key, (rec, []))[1].append(f.unit)
    parts = ['<section id="starting-values"><h2>Starting values</h2>']
    texts: list[str] = []
    for rec, units in groups.values():
        which = f" (unit(s) {_e(', '.join(units))})" if len(groups) > 1 else ""
        if rec is None:
            parts.append(
                f"<p>No natural-history preset{which}: the package defaults (see Methods) with "
                "the run's own settings.</p>"
            )
            continue
        values = rec.get("values", [])
        replaced = [v for v in values if v.get("overridden")]
        parts.append(
            f"<h3>Preset <code>{_e(rec.get('name'))}</code>{which}"
            + (f": {_e(rec['title'])}" if rec.get("title") else "")
            + "</h3>"
            + (f"<p>{_e(rec['description'])}</p>" if rec.get("description") else "")
            + f"<p>The preset set {len(values)} value(s), each with its source; "
            f"{len(replaced)} of them were replaced by the workflow file or the command line "
            "(precedence: package defaults &lt; preset &lt; workflow file &lt; command line). "
            "A preset is a starting point, not a finding about these animals.</p>"
        )
        rows = [
            {
                "setting": v.get("key"),
                "preset value": format_value(v.get("value")),
                "source": v.get("source"),
                "used in this run": (
                    f"{format_value(v.get('used'))} (set by the {v.get('overridden_by')})"
                    if v.get("overridden")
                    else "preset value"
                ),
            }
            for v in values
        ]
        parts.append(_table(pd.DataFrame(rows), "plain starting-values"))
        cautions = rec.get("cautions") or []
        if cautions:
            items = "".join(f"<li>{_e(c)}</li>" for c in cautions)
            parts.append(f"<p>Cautions of the preset:</p><ul>{items}</ul>")
        texts += [str(v.get("source", "")) for v in values] + [str(c) for c in cautions]
    parts.append("</section>")
    return "".join(parts), texts


_CITATION = re.compile(
    r"[A-Z][A-Za-zÀ-ÿ'\-]+(?: et al\.| (?:&|and) [A-Z][A-Za-zÀ-ÿ'\-]+)? \(?(?:19|20)\d\d[a-z]?"
)


def _references(texts: list[str]) -> str:
    found = sorted({m.group(0).replace("(", "") for t in texts for m in _CITATION.finditer(t)})
    items = "".join(f"<li>{_e(x)}</li>" for x in found)
    extra = "".join(f"<li>{_e(x)}</li>" for x in EXTRA_REFERENCES)
    return (
        '<h3 id="references">References</h3><p>As cited by the priors, tissue defaults, '
        "preset values and amino-acid constants:</p>"
        f"<ul>{items}</ul><p>Methods of this report:</p><ul>{extra}</ul></section>"
    )


def _provenance(fits: list[FitFiles]) -> str:
    parts = ['<section id="provenance"><h2>Provenance</h2>']
    for f in fits:
        m = f.manifest
        inputs = pd.DataFrame(m.get("inputs", []))
        vers = pd.DataFrame(sorted(m.get("versions", {}).items()), columns=["package", "version"])
        parts.append(
            f"<h3>Unit {_e(f.unit)}</h3><p>Fit directory: <code>{_e(f.path)}</code>; seed "
            f"<code>{_e(m.get('seed'))}</code>; input hash <code>{_e(m.get('input_hash'))}</code>;"
            f" sampler {_e(m.get('sampler'))}; nstress {_e(m.get('nstress_version'))}.</p>"
        )
        if len(inputs):
            parts.append(_table(inputs, "plain"))
        parts.append(_table(vers, "plain"))
        parts.append(
            "<details><summary>configuration</summary><pre>"
            + _e(json.dumps(m.get("config", {}), indent=2, default=str))
            + "</pre></details><details><summary>timings (s)</summary><pre>"
            + _e(json.dumps(m.get("timings_s", {}), indent=2))
            + "</pre></details>"
        )
    parts.append("</section>")
    return "".join(parts)


_CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:0 auto;max-width:1100px;
padding:1em 2em;color:#1a1a1a;line-height:1.4}
h1{margin-bottom:.2em}h2{border-bottom:2px solid #0072B2;padding-bottom:.2em;margin-top:1.6em}
nav a{margin-right:1em}
.boxes{display:flex;flex-wrap:wrap;gap:.6em}.box{border:1px solid #bbb;border-radius:6px;
padding:.5em 1em;min-width:7em;text-align:center}.box .n{font-size:1.8em;font-weight:bold}
.warn{background:#fff3e0;border-left:5px solid #D55E00;padding:.3em 1em}.ok{color:#006e50}
.caution{background:#f4f8fb;border-left:5px solid #0072B2;padding:.2em 1em}
table{border-collapse:collapse;font-size:.85em;margin:.6em 0}th,td{border:1px solid #ccc;
padding:.25em .5em;text-align:left;vertical-align:top}th{background:#eef3f7}
table.sortable th{cursor:pointer}table.sortable th[data-dir=asc]::after{content:' ▲'}
table.sortable th[data-dir=desc]::after{content:' ▼'}.scroll{overflow-x:auto}
.st{padding:.05em .4em;border-radius:4px;color:#fff;font-size:.85em;white-space:nowrap}
.st.catabolic{background:#D55E00}.st.possible{background:#E69F00;color:#000}
.st.clear{background:#009E73}.st.cannot_tell{background:#56B4E9;color:#000}
.st.fit_failed{background:#8C8C8C}
dl{display:grid;grid-template-columns:max-content auto;gap:.1em 1em;font-size:.9em}
dt{font-weight:bold}dd{margin:0}figure{margin:.8em 0}img{max-width:100%;height:auto}
.individual{border-top:1px solid #ddd;margin-top:1em}pre{background:#f6f6f6;padding:.5em;
overflow-x:auto;font-size:.8em}
"""

_JS = """
document.querySelectorAll('table.sortable').forEach(function (t) {
  t.querySelectorAll('thead th').forEach(function (th, i) {
    th.addEventListener('click', function () {
      var body = t.tBodies[0], rows = Array.prototype.slice.call(body.rows);
      var asc = th.getAttribute('data-dir') !== 'asc';
      t.querySelectorAll('thead th').forEach(function (h) { h.removeAttribute('data-dir'); });
      th.setAttribute('data-dir', asc ? 'asc' : 'desc');
      rows.sort(function (a, b) {
        var x = a.cells[i].getAttribute('data-v'), y = b.cells[i].getAttribute('data-v');
        var nx = parseFloat(x), ny = parseFloat(y), c;
        if (!isNaN(nx) && !isNaN(ny)) { c = nx - ny; } else { c = String(x).localeCompare(y); }
        return asc ? c : -c;
      });
      rows.forEach(function (r) { body.appendChild(r); });
    });
  });
});
"""


def _merge(fits: list[FitFiles]) -> pd.DataFrame:
    sc = pd.concat([f.screening.assign(unit=f.unit) for f in fits], ignore_index=True)
    dup = sc["individual"].duplicated(keep=False)
    sc["uid"] = np.where(dup, sc["unit"] + "/" + sc["individual"], sc["individual"])
    order = {s: i for i, s in enumerate(("catabolic", "possible", "cannot_tell", "fit_failed"))}
    sc["_o"] = sc["status"].map(order).fillna(len(order))
    sc = sc.sort_values(
        ["_o", "p_catabolic_any", "peak_enrichment_d15N_mean"],
        ascending=[True, False, False],
        kind="stable",
    )
    if len(fits) > 1:
        sc["rank"] = np.arange(1, len(sc) + 1)
    return sc.drop(columns="_o").reset_index(drop=True)


def _draw_figures(
    fits: list[FitFiles], sc: pd.DataFrame, fig_dir: Path, anchors: dict[str, str]
) -> dict[str, Path]:
    pngs: dict[str, Path] = {}
    tl = pd.concat([f.timelines.assign(unit=f.unit) for f in fits], ignore_index=True)
    uid_of = dict(zip(zip(sc["unit"], sc["individual"], strict=True), sc["uid"], strict=True))
    tl["individual_key"] = [
        uid_of.get(k, k[1]) for k in zip(tl["unit"], tl["individual"], strict=True)
    ]
    tl_uid = tl.drop(columns="individual").rename(columns={"individual_key": "individual"})
    sc_uid = sc.drop(columns="individual").rename(columns={"uid": "individual"})
    pngs["overview"] = figs.save_figure(
        figs.colony_overview(tl_uid, sc_uid), fig_dir, "colony_overview"
    )["png"]
    pngs["ranking"] = figs.save_figure(figs.ranking_figure(sc_uid), fig_dir, "ranking")["png"]
    pngs["onsets"] = figs.save_figure(figs.onset_figure(sc_uid), fig_dir, "onsets")["png"]
    gamma = {g: v for f in fits for g, v in f.gamma.items()}
    ws = next((f.walk_sd for f in fits if f.walk_sd is not None), None)
    wc = next((f.walk_corr for f in fits if f.walk_corr is not None), None)
    pngs["plane"] = figs.save_figure(
        figs.isotope_plane(tl_uid, sc_uid, gamma, ws, wc), fig_dir, "isotope_plane"
    )["png"]
    for f in fits:
        slug = re.sub(r"[^A-Za-z0-9_.-]+", "_", f.unit)
        if f.traces:
            pngs[f"trace:{f.unit}"] = figs.save_figure(
                figs.trace_figure(f.traces), fig_dir, f"trace_{slug}"
            )["png"]
        if f.predictions is not None and len(f.predictions):
            pngs[f"ppc:{f.unit}"] = figs.save_figure(
                figs.ppc_figure(f.predictions), fig_dir, f"ppc_{slug}"
            )["png"]
    by_unit = {f.unit: f for f in fits}
    for _, r in sc.iterrows():
        f = by_unit[r["unit"]]
        tli = f.timelines[f.timelines["individual"] == r["individual"]]
        pri = (
            f.predictions[f.predictions["individual"] == r["individual"]]
            if f.predictions is not None
            else None
        )
        fig = figs.individual_figure(r["uid"], pri, tli, r["status"])
        stem = "individual_" + anchors[r["uid"]].removeprefix("ind-")
        pngs[r["uid"]] = figs.save_figure(fig, fig_dir, stem)["png"]
    return pngs


def write_report(fit_dirs: list[Path], out_dir: Path, title: str | None = None) -> Path:
    """Render ``report.html`` (and ``figures/``) from the files of one or more fit directories.

    Parameters
    ----------
    fit_dirs
        Finished fit directories (each with ``manifest.json``); several units
        of a run give one merged report.
    out_dir
        Where ``report.html`` and ``figures/`` are written (created).
    title
        Page title (default: "nstress report" and the unit names).

    Returns
    -------
    pathlib.Path
        The path of ``report.html``.

    Raises
    ------
    InputError
        A fit directory is unfinished or a file in it is missing or unreadable.
    """
    if not fit_dirs:
        raise InputError("no fit directory to report on")
    labels: set[str] = set()
    fits = []
    for d in fit_dirs:
        name = Path(d).resolve().name
        fits.append(read_fit_dir(Path(d), _slug(name, labels)))
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    sc = _merge(fits)
    used: set[str] = set()
    anchors = {uid: "ind-" + _slug(uid, used) for uid in sc["uid"]}
    pngs = _draw_figures(fits, sc, out_dir / "figures", anchors)
    title = title or "nstress report — " + ", ".join(f.unit for f in fits)
    methods, texts = _methods(fits)
    starting, preset_texts = _starting_values(fits)
    trophic, cited = _trophic(fits, sc)
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    nav = "".join(
        f'<a href="#{k}">{v}</a>'
        for k, v in (
            ("summary", "Summary"),
            ("cautions", "Cautions"),
            ("colony", "Colony"),
            ("screening", "Screening"),
            ("individuals", "Individuals"),
            *((("trophic", "Trophic position"),) if trophic else ()),
            ("diagnostics", "Diagnostics"),
            ("power", "Design power"),
            ("starting-values", "Starting values"),
            ("methods", "Methods"),
            ("provenance", "Provenance"),
        )
    )
    page = (
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>"
        f"<header><h1>{_e(title)}</h1><p>Rendered {stamp} by nstress {__version__} from "
        f"{len(fits)} fit director{'y' if len(fits) == 1 else 'ies'}. δ values in ‰: δ¹⁵N vs "
        "AIR, δ¹³C vs VPDB; times in days; dates ISO 8601.</p><nav>"
        + nav
        + "</nav></header>"
        + _summary(fits, sc)
        + _cautions()
        + _colony(fits, pngs)
        + _screening_table(sc, anchors, len(fits) > 1)
        + _individuals(sc, anchors, pngs)
        + trophic
        + _diagnostics(fits, pngs)
        + _power(out_dir)
        + starting
        + methods
        + _references(texts + cited + preset_texts)
        + _provenance(fits)
        + f"<script>{_JS}</script></body></html>"
    )
    path = out_dir / "report.html"
    atomic_write_text(path, page)
    return path
