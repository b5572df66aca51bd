"""Scale normalisation of δ15N and δ13C from reference-material rows (Paul et al. 2007).

For each analysis batch and isotope:

* **anchors** are the reference rows with role ``anchor``; when no row of
  the batch has a role, the two materials with the most extreme assigned
  values for that isotope;
* the line δ_true = a·δ_meas + b goes through the anchors' mean measured
  values and their assigned values: exactly two-point with two anchor
  materials (Paul et al. 2007), least squares with more (and the report
  says so);
* it is applied to that batch's samples; the other reference rows are
  **check standards**, whose residuals (normalised − assigned) are reported.

Batches: reference rows and samples are matched on ``analysis_batch``.
Reference rows without a batch serve every batch that has none of its
own. If the samples carry no batch, all reference rows are pooled.

Modes: ``"auto"`` normalises where two distinct anchors exist, ``"off"``
never does, ``"on"`` requires them for every batch and isotope that has
sample values (else :class:`nstress.errors.ConfigError`).

Samples outside the anchors' measured range are flagged ("outside the
anchor range"): the line is then an extrapolation. A stretch far from 1
(mislabelled material?) and check standards off by more than the
tolerance flag the batch's samples.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from nstress._chem_equations import scale_line_lstsq, two_point_line, two_point_normalise
from nstress.dims import ISOTOPES
from nstress.errors import ConfigError, InputError
from nstress.intake.ledger import Ledger
from nstress.prep.qc import QCLog, ledger_keys, numeric, one_reason, text

MODES = ("auto", "off", "on")
LABEL = {"d15N": "δ15N", "d13C": "δ13C"}
_POOLED = "all"
_NO_BATCH = "(none)"


def _batch_groups(
    samples: pd.DataFrame, refs: pd.DataFrame
) -> tuple[list[tuple[str, np.ndarray, pd.DataFrame]], list[str]]:
    """Return ``[(label, sample_mask, reference_rows)]`` and warnings."""
    sb = text(samples, "analysis_batch")
    ref_batches = set(refs["batch"].tolist())
    warnings: list[str] = []
    if ref_batches <= {""} or (sb == "").all():
        if len(ref_batches - {""}) > 1:
            warnings.append(
                "samples carry no analysis_batch: reference rows of batches "
                f"{sorted(ref_batches - {''})} were pooled into one normalisation"
            )
        return [(_POOLED, np.ones(len(samples), dtype=bool), refs)], warnings
    groups = []
    fallback = refs[refs["batch"] == ""]
    for b in sorted(set(sb.tolist())):
        own = refs[refs["batch"] == b] if b else refs.iloc[0:0]
        groups.append((b or _NO_BATCH, sb == b, own if len(own) else fallback))
    return groups, warnings


def _anchors(refs: pd.DataFrame, iso: str) -> tuple[np.ndarray, np.ndarray, str]:
    """Return boolean masks (anchor rows, check rows) and how anchors were chosen."""
    meas = refs[iso].to_numpy(dtype=float)
    cert = refs[f"certified_{iso}"].to_numpy(dtype=float)
    usable = np.isfinite(meas) & np.isfinite(cert)
    roles = refs["role"].to_numpy(dtype=object)
    if (roles != "").any():
        anchor = usable & (roles == "anchor")
        return anchor, usable & ~anchor, "reference_role"
    if not usable.any():
        return usable, usable, "none usable"
    rms = refs["rm"].to_numpy(dtype=object)
    lo_rm = rms[usable][np.argmin(cert[usable])]
    hi_rm = rms[usable][np.argmax(cert[usable])]
    anchor = usable & np.isin(rms, [lo_rm, hi_rm])
    return anchor, usable & ~anchor, "most extreme assigned values (no roles given)"


def _fit(refs: pd.DataFrame, anchor: np.ndarray, iso: str, batch: str) -> dict[str, Any] | None:
    """Fit the normalisation line through the anchor means; None if < 2 distinct anchors."""
    a = refs[anchor]
    g = (
        a.groupby("rm", sort=False)
        .agg(measured=(iso, "mean"), n=(iso, "size"), certified=(f"certified_{iso}", "first"))
        .sort_values("certified")
    )
    if len(g) < 2 or g["certified"].nunique() < 2:
        return None
    x, y = g["measured"].to_numpy(float), g["certified"].to_numpy(float)
    try:
        if len(g) == 2:
            slope, intercept = two_point_line(x[0], y[0], x[1], y[1])
            method = "two-point (Paul et al. 2007)"
        else:
            slope, intercept = scale_line_lstsq(x, y)
            method = f"least squares through {len(g)} anchors (not exactly two-point)"
    except (ZeroDivisionError, ValueError) as exc:
        first = a.iloc[0]
        raise InputError(
            f"anchors {list(g.index)} have the same mean measured {LABEL[iso]} in batch "
            f"{batch!r}; no normalisation line is defined",
            file=str(first.get("source_file", "")) or None,
            row=int(first["source_row"]) if pd.notna(first.get("source_row")) else None,
            column=iso,
            value=float(first[iso]),
        ) from exc
    return {
        "anchors": [
            {
                "rm": str(rm),
                "n": int(r.n),
                "measured_mean": float(r.measured),
                "certified": float(r.certified),
            }
            for rm, r in g.iterrows()
        ],
        "method": method,
        "slope": float(slope),
        "intercept": float(intercept),
        "measured_range": [float(x.min()), float(x.max())],
        "_xy": (x, y),
    }


def _apply(values: np.ndarray, fit: dict[str, Any]) -> np.ndarray:
    x, y = fit["_xy"]
    if len(x) == 2:
        return two_point_normalise(values, x[0], y[0], x[1], y[1])
    return fit["slope"] * values + fit["intercept"]


def _residuals(refs: pd.DataFrame, check: np.ndarray, iso: str, fit: dict[str, Any]) -> list:
    c = refs[check]
    if not len(c):
        return []
    res = pd.DataFrame(
        {
            "rm": c["rm"].to_numpy(),
            "measured": c[iso].to_numpy(float),
            "normalised": _apply(c[iso].to_numpy(float), fit),
            "certified": c[f"certified_{iso}"].to_numpy(float),
        }
    )
    res["residual"] = res["normalised"] - res["certified"]
    out = []
    for rm, r in res.groupby("rm", sort=True):
        out.append(
            {
                "rm": str(rm),
                "n": int(len(r)),
                "certified": float(r["certified"].iloc[0]),
                "normalised_mean": float(r["normalised"].mean()),
                "mean_residual": float(r["residual"].mean()),
                "sd_residual": float(r["residual"].std(ddof=1)) if len(r) > 1 else None,
                "max_abs_residual": float(r["residual"].abs().max()),
            }
        )
    return out


def normalise_scale(
    samples: pd.DataFrame,
    refs: pd.DataFrame,
    ledger: Ledger,
    qc: QCLog,
    *,
    mode: str = "auto",
    check_tolerance: float = 0.3,
    stretch_tolerance: float = 0.1,
) -> dict[str, Any]:
    """Scale-normalise the samples' δ15N and δ13C in place, batch by batch.

    Adds ``d15N_raw`` and ``d13C_measured`` (the values as measured),
    ``d15N_scaled`` and ``d13C_scaled`` (whether normalised) and replaces
    ``d15N`` and ``d13C`` by the normalised values where applied. Adds
    ``normalised_d15N``/``normalised_d13C`` to ``refs``.

    Parameters
    ----------
    samples
        Sample table (changed in place).
    refs
        Reference rows from :func:`nstress.prep.refmaterials.resolve_references`
        (changed in place).
    ledger
        Ledger for notes and flags (samples and reference rows).
    qc
        Per-row QC remarks.
    mode
        ``"auto"``, ``"off"`` or ``"on"`` (see the module docstring).
    check_tolerance
        |mean residual| of a check standard (‰) above which the batch's
        samples are flagged (0.3 ‰ ≈ twice a typical 0.15 ‰ SD: common practice).
    stretch_tolerance
        |slope − 1| above which the batch's samples are flagged (common practice).

    Returns
    -------
    dict
        Mode, calibrations (batch, isotope, anchors, method, slope,
        intercept, samples normalised, outside the anchor range, check
        residuals), what was not normalised and why, and warnings.

    Raises
    ------
    ConfigError
        ``mode="on"`` and a batch/isotope with sample values lacks two
        distinct anchors.
    InputError
        Two anchors measured alike (no line).
    """
    samples["d15N_raw"] = numeric(samples, "d15N")
    samples["d13C_measured"] = numeric(samples, "d13C")
    for iso in ISOTOPES:
        samples[f"{iso}_scaled"] = False
        refs[f"normalised_{iso}"] = np.nan
    report: dict[str, Any] = {
        "mode": mode,
        "reference_rows": int(len(refs)),
        "calibrations": [],
        "not_normalised": [],
        "warnings": [],
    }
    if mode == "off":
        return report
    if len(refs) == 0:
        if mode == "on":
            raise ConfigError(
                "scale_normalisation = 'on' needs reference-material rows; the input has none",
                key="scale_normalisation",
            )
        report["warnings"].append("no reference-material rows: values used as reported")
        return report
    groups, warnings = _batch_groups(samples, refs)
    report["warnings"].extend(warnings)
    ref_keys = numeric(refs, "key")
    done: dict[str, np.ndarray] = {iso: np.zeros(len(samples), dtype=bool) for iso in ISOTOPES}
    missing: dict[str, list[tuple[str, np.ndarray]]] = {iso: [] for iso in ISOTOPES}
    for batch, smask, r in groups:
        r_idx = refs.index.get_indexer(r.index)
        for iso in ISOTOPES:
            vals = numeric(samples, iso)
            target = smask & np.isfinite(vals)
            if not target.any():
                continue
            anchor, check, chosen = _anchors(r, iso) if len(r) else (None, None, "no rows")
            fit = _fit(r, anchor, iso, batch) if anchor is not None else None
            if fit is None:
                have = sorted(set(r.loc[anchor, "rm"])) if anchor is not None else []
                reason = (
                    f"fewer than two distinct anchors for {LABEL[iso]} in batch {batch!r} "
                    f"(anchors found: {have})"
                )
                if mode == "on":
                    raise ConfigError(
                        f"scale_normalisation = 'on' but there are {reason}",
                        key="scale_normalisation",
                    )
                report["not_normalised"].append(
                    {
                        "batch": batch,
                        "isotope": iso,
                        "n_samples": int(target.sum()),
                        "reason": reason,
                    }
                )
                missing[iso].append((batch, target))
                continue
            new = _apply(vals[target], fit)
            vals_out = vals.copy()
            vals_out[target] = new
            samples[iso] = vals_out
            flags = samples[f"{iso}_scaled"].to_numpy(dtype=bool).copy()
            flags[target] = True
            samples[f"{iso}_scaled"] = flags
            done[iso] |= target
            names = ", ".join(a["rm"] for a in fit["anchors"])
            ledger.note(
                ledger_keys(samples, target),
                one_reason(
                    f"{LABEL[iso]} scale-normalised ({fit['method']}, anchors {names}, "
                    f"batch {batch})"
                ),
            )
            # reference rows: anchors and check standards of this calibration
            ref_norm = refs[f"normalised_{iso}"].to_numpy(dtype=float).copy()
            usable_r = anchor | check
            ref_norm[r_idx[usable_r]] = _apply(r[iso].to_numpy(float)[usable_r], fit)
            refs[f"normalised_{iso}"] = ref_norm
            for mask, what in ((anchor, "anchor"), (check, "check standard")):
                ks = ref_keys[r_idx[mask]]
                ledger.note(
                    ks[np.isfinite(ks)].astype(np.int64),
                    one_reason(f"reference material: {LABEL[iso]} {what} (batch {batch})"),
                )
            lo, hi = fit["measured_range"]
            outside = target & ((vals < lo) | (vals > hi))
            ledger.flag(
                ledger_keys(samples, outside),
                one_reason(
                    f"{LABEL[iso]} outside the anchor range ({names}, batch {batch}): extrapolated"
                ),
            )
            qc.add(outside, f"{LABEL[iso]} outside the anchor range")
            residuals = _residuals(r, check, iso, fit)
            entry = {k: v for k, v in fit.items() if not k.startswith("_")}
            entry.update(
                batch=batch,
                isotope=iso,
                anchor_choice=chosen,
                n_samples=int(target.sum()),
                n_outside_anchor_range=int(outside.sum()),
                checks=residuals,
            )
            if abs(fit["slope"] - 1.0) > stretch_tolerance:
                msg = one_reason(
                    f"{LABEL[iso]} scale stretch {fit['slope']:.3f} in batch {batch} is far "
                    f"from 1 (mislabelled reference material?)"
                )
                ledger.flag(ledger_keys(samples, target), msg)
                report["warnings"].append(msg)
            for c in residuals:
                if abs(c["mean_residual"]) > check_tolerance:
                    msg = one_reason(
                        f"check standard {c['rm']} off by {c['mean_residual']:+.2f} ‰ after "
                        f"{LABEL[iso]} normalisation (batch {batch}, "
                        f"tolerance {check_tolerance:g} ‰)"
                    )
                    ledger.flag(ledger_keys(samples, target), msg)
                    report["warnings"].append(msg)
            report["calibrations"].append(entry)
    for iso in ISOTOPES:
        if done[iso].any():
            for batch, target in missing[iso]:
                ledger.flag(
                    ledger_keys(samples, target),
                    one_reason(
                        f"{LABEL[iso]} not scale-normalised in batch {batch} "
                        "while other batches were"
                    ),
                )
                qc.add(target, f"{LABEL[iso]} not scale-normalised")
    return report
