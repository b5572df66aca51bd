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
from nstress.prep.qc import QCLog, RowKeys, numeric, one_reason, text

MODES = ("auto", "off", "on")
LABEL = {"d15N": "δ15N", "d13C": "δ13C"}
_POOLED = "all"
_NO_BATCH = "(none)"


class _RefColumns:
    """The reference rows' columns as arrays, read once (one calibration per batch and isotope).

    Indexing the table per batch costs more than the arithmetic; positions
    into these arrays stand for the rows.
    """

    def __init__(self, refs: pd.DataFrame) -> None:
        self.rm = refs["rm"].to_numpy(dtype=object)
        self.role = refs["role"].to_numpy(dtype=object)
        self.value = {iso: refs[iso].to_numpy(dtype=float) for iso in ISOTOPES}
        self.certified = {iso: refs[f"certified_{iso}"].to_numpy(dtype=float) for iso in ISOTOPES}


def _batch_groups(
    samples: pd.DataFrame, refs: pd.DataFrame
) -> tuple[list[tuple[str, np.ndarray, np.ndarray]], list[str]]:
    """Return ``[(label, sample_rows, reference_rows)]`` and warnings.

    Both are ascending positions: of the batch's samples, and of the
    reference rows that calibrate them.
    """
    sb = text(samples, "analysis_batch")
    rb = refs["batch"].to_numpy(dtype=object)
    ref_batches = set(rb.tolist())
    warnings: list[str] = []
    codes, uniq = pd.factorize(sb)
    if ref_batches <= {""} or (len(uniq) <= 1 and (sb == "").all()):
        if len(ref_batches - {""}) > 1:
            warnings.append(
                "samples carry no analysis_batch: reference rows of batches "
                f"{sorted(ref_batches - {''})} were pooled into one normalisation"
            )
        return [(_POOLED, np.arange(len(samples)), np.arange(len(refs)))], warnings
    groups = []
    ref_rows: dict[str, list[int]] = {}
    for i, rbatch in enumerate(rb.tolist()):
        ref_rows.setdefault(rbatch, []).append(i)
    fallback = np.asarray(ref_rows.get("", []), dtype=np.int64)
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(len(uniq) + 1))
    rows_of = {str(b): order[bounds[j] : bounds[j + 1]] for j, b in enumerate(uniq.tolist())}
    for b in sorted(rows_of):
        own = np.asarray(ref_rows.get(b, []) if b else [], dtype=np.int64)
        groups.append((b or _NO_BATCH, rows_of[b], own if len(own) else fallback))
    return groups, warnings


def _anchors(rc: _RefColumns, rows: np.ndarray, iso: str) -> tuple[np.ndarray, np.ndarray, str]:
    """Return boolean masks over ``rows`` (anchor rows, check rows) and how anchors were chosen."""
    meas = rc.value[iso][rows]
    cert = rc.certified[iso][rows]
    usable = np.isfinite(meas) & np.isfinite(cert)
    roles = rc.role[rows]
    if (roles != "").any():
        anchor = usable & (roles == "anchor")
        return anchor, usable & ~anchor, "reference_role"
    if not usable.any():
        return usable, usable, "none usable"
    rms = rc.rm[rows]
    lo_rm = rms[usable][np.argmin(cert[usable])]
    hi_rm = rms[usable][np.argmax(cert[usable])]
    anchor = usable & np.isin(rms, [lo_rm, hi_rm])
    return anchor, usable & ~anchor, "most extreme assigned values (no roles given)"


def _fit(
    refs: pd.DataFrame, rc: _RefColumns, rows: np.ndarray, iso: str, batch: str
) -> dict[str, Any] | None:
    """Fit the line through the anchor means (anchors: positions ``rows``); None if < 2 distinct.

    Per material, the same numbers as ``refs.iloc[rows].groupby("rm", sort=False)``
    aggregated and sorted by the assigned value, without pandas' overhead per call.
    """
    codes, rms = pd.factorize(rc.rm[rows])
    first = np.unique(codes, return_index=True)[1]
    cert = rc.certified[iso][rows][first]
    order = np.argsort(cert, kind="quicksort")  # what sort_values uses (no NaN here)
    means = pd.Series(rc.value[iso][rows]).groupby(codes).mean().to_numpy()  # pandas' own mean
    counts = np.bincount(codes, minlength=len(rms))[order].tolist()
    names = [str(v) for v in np.asarray(rms, dtype=object)[order].tolist()]
    x, y = means[order].astype(float), cert[order].astype(float)
    if len(names) < 2 or len(set(y.tolist())) < 2:
        return None
    try:
        if len(names) == 2:
            slope, intercept = two_point_line(x[0], y[0], x[1], y[1])
            method = "two-point (Paul et al. 2007)"
        else:
            slope, intercept = scale_line_lstsq(x, y)
            method = f"least squares through {len(names)} anchors (not exactly two-point)"
    except (ZeroDivisionError, ValueError) as exc:
        first_row = refs.iloc[int(rows[0])]
        raise InputError(
            f"anchors {names} have the same mean measured {LABEL[iso]} in batch "
            f"{batch!r}; no normalisation line is defined",
            file=str(first_row.get("source_file", "")) or None,
            row=int(first_row["source_row"]) if pd.notna(first_row.get("source_row")) else None,
            column=iso,
            value=float(first_row[iso]),
        ) from exc
    return {
        "anchors": [
            {
                "rm": name,
                "n": int(k),
                "measured_mean": float(xm),
                "certified": float(yc),
            }
            for name, k, xm, yc in zip(names, counts, x.tolist(), y.tolist(), strict=True)
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


def _residuals(rc: _RefColumns, rows: np.ndarray, iso: str, fit: dict[str, Any]) -> list:
    """Check-standard residuals per material (check rows: positions ``rows``), sorted by name."""
    if not rows.size:
        return []
    rm = rc.rm[rows]
    normalised = _apply(rc.value[iso][rows], fit)
    certified = rc.certified[iso][rows]
    residual = normalised - certified
    out = []
    for name in sorted(set(rm.tolist())):  # as a groupby over rm, without its overhead
        m = rm == name
        res, norm = pd.Series(residual[m]), pd.Series(normalised[m])
        out.append(
            {
                "rm": str(name),
                "n": int(m.sum()),
                "certified": float(certified[m][0]),
                "normalised_mean": float(norm.mean()),
                "mean_residual": float(res.mean()),
                "sd_residual": float(res.std(ddof=1)) if m.sum() > 1 else None,
                "max_abs_residual": float(res.abs().max()),
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
    row_keys: RowKeys | None = None,
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
    row_keys
        :class:`~nstress.prep.qc.RowKeys` of ``samples`` when the caller has
        them (saves flattening the ``keys`` column again).

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
    rc = _RefColumns(refs)
    ref_keys = numeric(refs, "key")
    ref_norm = {iso: np.full(len(refs), np.nan) for iso in ISOTOPES}
    keys_of = (row_keys if row_keys is not None else RowKeys(samples)).of_rows
    n = len(samples)
    measured = {iso: numeric(samples, iso) for iso in ISOTOPES}
    values = {iso: measured[iso].copy() for iso in ISOTOPES}  # batches are disjoint
    done: dict[str, np.ndarray] = {iso: np.zeros(n, dtype=bool) for iso in ISOTOPES}
    missing: dict[str, list[tuple[str, np.ndarray]]] = {iso: [] for iso in ISOTOPES}

    def rows_mask(rows: np.ndarray) -> np.ndarray:
        m = np.zeros(n, dtype=bool)
        m[rows] = True
        return m

    for batch, srows, rrows in groups:
        for iso in ISOTOPES:
            vals = measured[iso]
            trows = srows[np.isfinite(vals[srows])]
            if not trows.size:
                continue
            if len(rrows):
                anchor, check, chosen = _anchors(rc, rrows, iso)
                fit = _fit(refs, rc, rrows[anchor], iso, batch)
            else:
                anchor, check, chosen, fit = None, None, "no rows", None
            if fit is None:
                have = sorted(set(rc.rm[rrows[anchor]].tolist())) if anchor is not None else []
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
                        "n_samples": int(trows.size),
                        "reason": reason,
                    }
                )
                missing[iso].append((batch, trows))
                continue
            assert anchor is not None and check is not None
            values[iso][trows] = _apply(vals[trows], fit)
            done[iso][trows] = True
            target_keys = keys_of(trows)
            names = ", ".join(a["rm"] for a in fit["anchors"])
            ledger.note(
                target_keys,
                one_reason(
                    f"{LABEL[iso]} scale-normalised ({fit['method']}, anchors {names}, "
                    f"batch {batch})"
                ),
            )
            # reference rows: anchors and check standards of this calibration
            usable_r = rrows[anchor | check]
            ref_norm[iso][usable_r] = _apply(rc.value[iso][usable_r], fit)
            for mask, what in ((anchor, "anchor"), (check, "check standard")):
                ks = ref_keys[rrows[mask]]
                ledger.note(
                    ks[np.isfinite(ks)].astype(np.int64),
                    one_reason(f"reference material: {LABEL[iso]} {what} (batch {batch})"),
                )
            lo, hi = fit["measured_range"]
            out_rows = trows[(vals[trows] < lo) | (vals[trows] > hi)]
            if out_rows.size:
                ledger.flag(
                    keys_of(out_rows),
                    one_reason(
                        f"{LABEL[iso]} outside the anchor range ({names}, batch {batch}): "
                        "extrapolated"
                    ),
                )
                qc.add(rows_mask(out_rows), f"{LABEL[iso]} outside the anchor range")
            residuals = _residuals(rc, rrows[check], iso, fit)
            entry = {k: v for k, v in fit.items() if not k.startswith("_")}
            entry.update(
                batch=batch,
                isotope=iso,
                anchor_choice=chosen,
                n_samples=int(trows.size),
                n_outside_anchor_range=int(out_rows.size),
                checks=residuals,
            )
            if abs(fit["slope"] - 1.0) > stretch_tolerance:
                msg = one_reason(
                    f"{LABEL[iso]} scale stretch {fit['slope']:.3f} in batch {batch} is far "
                    f"from 1 (mislabelled reference material?)"
                )
                ledger.flag(target_keys, msg)
                report["warnings"].append(msg)
            for c in residuals:
                if abs(c["mean_residual"]) > check_tolerance:
                    msg = one_reason(
                        f"check standard {c['rm']} off by {c['mean_residual']:+.2f} ‰ after "
                        f"{LABEL[iso]} normalisation (batch {batch}, "
                        f"tolerance {check_tolerance:g} ‰)"
                    )
                    ledger.flag(target_keys, msg)
                    report["warnings"].append(msg)
            report["calibrations"].append(entry)
    for iso in ISOTOPES:
        refs[f"normalised_{iso}"] = ref_norm[iso]
    for iso in ISOTOPES:
        if done[iso].any():
            samples[iso] = values[iso]
            samples[f"{iso}_scaled"] = done[iso]
    for iso in ISOTOPES:
        if done[iso].any():
            for batch, trows in missing[iso]:
                target = rows_mask(trows)
                ledger.flag(
                    keys_of(trows),
                    one_reason(
                        f"{LABEL[iso]} not scale-normalised in batch {batch} "
                        "while other batches were"
                    ),
                )
                qc.add(target, f"{LABEL[iso]} not scale-normalised")
    return report
