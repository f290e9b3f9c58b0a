"""``diff --explain``: which part of the light transport a test frame gets wrong.

The reference carries decomposition layers (refrender.layers: ``transport``,
``bounces``, ``light_groups``), each an unbiased estimate with its variance,
and the layers of one kind sum to the beauty.  For each kind the test frame
is fitted as

    test ≈ Σ_i w_i · layer_i

by weighted least squares over every selected pixel and channel (weights
1 / (var_test + var_ref)), with instrumental variables against the noise of
the reference's layers (see fit_kind).  Each w_i gets a robust standard
error.  A layer is reported when its weight differs from 1 by more than 4
standard errors; the kind that needs the fewest deviating layers is the
explanation (ties: the smallest χ² per degree of freedom), and what the
other kinds see is listed after it.  The same frame rendered by the same
estimator gives all w_i = 1 within noise, and nothing is reported.
"""
from __future__ import annotations

import math
import re

import numpy as np

from .inputs import CompareError

#: a weight is reported when |w - 1| > Z_REPORT standard errors
Z_REPORT = 4.0


def describe(name: str) -> str:
    """Words for a layer name."""
    if name == "direct":
        return "direct light (emitters seen directly and single scattering)"
    if name == "indirect":
        return "indirect light (two or more scattering events)"
    if name == "bounce0":
        return "emitters seen directly"
    m = re.fullmatch(r"bounce(\d+)plus", name)
    if m:
        k = int(m.group(1))
        return f"indirect light from bounce {k} on" if k > 1 else "light from the first bounce on"
    m = re.fullmatch(r"bounce(\d+)", name)
    if m:
        k = int(m.group(1))
        return f"light after {k} scattering event{'s' if k > 1 else ''}"
    if name == "light.environment":
        return "the environment light"
    if name.startswith("light."):
        return f"light group '{name[6:]}'"
    return f"layer {name!r}"


def lacks(name: str) -> str:
    m = re.fullmatch(r"bounce(\d+)plus", name)
    if m:
        return f"the frame lacks bounces ≥ {m.group(1)}"
    return f"the frame lacks {describe(name)}"


def kinds_of(metadata: dict, layer_names) -> dict:
    """kind -> layer names of a reference (from its metadata, else by name)."""
    from ..layers import decomposition
    available = set(layer_names)
    slots = metadata.get("layer_slots") or []
    groups = [s[6:] for s in slots if s.startswith("light.")]
    kinds = decomposition(metadata.get("layers") or [], groups) if metadata.get("layers") else {}
    if not kinds:
        names = sorted(available)
        if {"direct", "indirect"} <= available:
            kinds["transport"] = ["direct", "indirect"]
        b = [n for n in names if re.fullmatch(r"bounce\d+(plus)?", n)]
        if b:
            kinds["bounces"] = sorted(b, key=lambda n: int(re.sub(r"\D", "", n)))
        g = [n for n in names if n.startswith("light.") and not n.endswith(".variance")]
        if g:
            kinds["light_groups"] = g
    return {k: v for k, v in kinds.items() if v and all(n in available for n in v)}


def ring_mean(x: np.ndarray) -> np.ndarray:
    """Mean of the 8 neighbours of every pixel (the pixel itself excluded; the
    outermost pixels are not used by the fits)."""
    p = np.pad(x, ((1, 1), (1, 1)) + ((0, 0),) * (x.ndim - 2), mode="edge")
    h, w = x.shape[:2]
    tot = np.zeros_like(x, dtype=np.float64)
    for dy in (0, 1, 2):
        for dx in (0, 1, 2):
            if dy == 1 and dx == 1:
                continue
            tot += p[dy:dy + h, dx:dx + w]
    return tot / 8.0


def fit_kind(test, var_test, layers, variances, sel, var_ref=None) -> dict:
    """Weights of one decomposition by instrumental variables.

    Plain least squares on the reference's noisy layers is biased (errors in
    the regressors, and the layers of one sample are correlated).  The
    instruments are the layers averaged over each pixel's 8 neighbours:
    their noise is independent of the pixel's own (a pixel's samples count
    for it alone), so the estimate is consistent (e.g. Wooldridge,
    "Econometric Analysis of Cross Section and Panel Data", ch. 5).  Weights
    1 / (var_test + var_ref) come from the neighbours too; the standard errors
    are the heteroscedasticity-robust sandwich of the residuals (White 1980,
    Econometrica 48), which covers the unknown covariance between layers.
    """
    n = len(layers)
    h, w = test.shape[:2]
    inner = np.zeros((h, w), dtype=bool)
    inner[1:h - 1, 1:w - 1] = True
    sel = sel & inner
    vt = np.zeros_like(test) if var_test is None else np.where(np.isfinite(var_test), var_test, 0.0)
    vr = sum(variances) if var_ref is None else np.where(np.isfinite(var_ref), var_ref, 0.0)
    vr = np.where(np.isfinite(vr), vr, 0.0)
    beauty = sum(layers)
    scale = float(np.mean(np.abs(test[sel]))) if sel.any() else 1.0
    var = ring_mean(vt + vr) + ring_mean((1e-3 * beauty) ** 2) + (1e-4 * scale) ** 2 + 1e-300
    W = (1.0 / var)[sel].reshape(-1)
    T = test[sel].reshape(-1)
    A = np.stack([L[sel].reshape(-1) for L in layers], axis=1)
    Z = np.stack([ring_mean(L)[sel].reshape(-1) for L in layers], axis=1)
    live = (np.abs(A).sum(axis=0) > 0) & (np.abs(Z).sum(axis=0) > 0)
    wts = np.ones(n)
    cov = np.full((n, n), np.inf)
    if live.any():
        Al, Zl = A[:, live], Z[:, live]
        zwa = (Zl * W[:, None]).T @ Al
        bread = np.linalg.pinv(zwa)
        wl = bread @ ((Zl * W[:, None]).T @ T)
        e = T - Al @ wl
        g = Zl * (W * e)[:, None]
        cl = bread @ (g.T @ g) @ bread.T
        wts[live] = wl
        idx = np.nonzero(live)[0]
        cov[np.ix_(idx, idx)] = cl
    resid = T - A @ wts
    # the diagnosis' floor: 0.1 % of the value (exactly known pixels such as emitters
    # seen directly still carry float32 storage rounding) and 1e-4 of the mean level
    vfull = (vt + vr)[sel].reshape(-1) + (1e-3 * A.sum(axis=1)) ** 2 + (1e-4 * scale) ** 2 + 1e-300
    chi2 = float((resid * resid / vfull).sum())
    chi2_id = float(((T - A.sum(axis=1)) ** 2 / vfull).sum())
    dof = max(T.size - int(live.sum()), 1)
    se = np.sqrt(np.maximum(np.diag(cov), 0.0))
    return {"weights": wts.tolist(), "standard_errors": se.tolist(), "chi2": chi2, "dof": dof,
            "chi2_identity": chi2_id, "live": live.tolist()}


def verdict_lines(names, fit) -> list:
    lines = []
    for name, w, se, live in zip(names, fit["weights"], fit["standard_errors"], fit["live"]):
        if not live or not math.isfinite(se):
            continue
        if abs(w - 1.0) <= Z_REPORT * se:
            continue
        desc = describe(name)
        if abs(w) <= Z_REPORT * se or w < 0.02:
            lines.append(lacks(name) + f" (weight {w:.3f} ± {se:.3f})")
        elif w >= 1.5:
            lines.append(f"{desc} is {w:.2g}× too bright (weight {w:.3f} ± {se:.3f})")
        elif w > 1.0:
            lines.append(f"{desc} is {100 * (w - 1):.2g} % ± {100 * se:.2g} % too bright")
        elif w <= 2.0 / 3.0:
            lines.append(f"{desc} is {1 / w:.2g}× too dark (weight {w:.3f} ± {se:.3f})")
        else:
            lines.append(f"{desc} is {100 * (1 - w):.2g} % ± {100 * se:.2g} % too dark")
    return lines


def explain(reference_layers: dict, test, var_test=None, *, kinds: dict, mask=None,
            var_ref=None) -> dict:
    """Fit every decomposition kind; ``reference_layers`` maps a layer name to
    (mean (H, W, 3), variance (H, W, 3)).  Returns a JSON-ready dict with
    ``kinds`` (per kind: layers, weights, standard errors, χ²/dof, lines),
    ``best`` (the kind that fits best) and ``verdict`` (a list of sentences)."""
    if not kinds:
        raise CompareError("--explain: the reference has no decomposition layers (render it with "
                           "--layers transport,bounces,light_groups)")
    t = np.asarray(test, dtype=np.float64)
    sel = np.ones(t.shape[:2], dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    for name in {n for v in kinds.values() for n in v}:
        m, v = reference_layers[name]
        sel = sel & np.isfinite(m).all(axis=-1) & np.isfinite(v).all(axis=-1)
    sel &= np.isfinite(t).all(axis=-1)
    if var_test is not None:
        sel &= np.isfinite(var_test).all(axis=-1)
    if not sel.any():
        raise CompareError("--explain: no pixel where the reference layers and the test are finite")
    out = {}
    for kind, names in kinds.items():
        fit = fit_kind(t, var_test, [reference_layers[n][0] for n in names],
                       [reference_layers[n][1] for n in names], sel, var_ref)
        fit["layers"] = list(names)
        fit["chi2_per_dof"] = fit["chi2"] / fit["dof"]
        fit["lines"] = verdict_lines(names, fit)
        out[kind] = fit
    # the explanation: the kind that needs the fewest deviating layers (the
    # difference is concentrated in one part of the transport), then the best fit
    best = min(out, key=lambda k: (len(out[k]["lines"]) if out[k]["lines"] else math.inf,
                                   out[k]["chi2_per_dof"]))
    if not any(out[k]["lines"] for k in out):
        verdict = ["no part of the light transport differs (every layer weight is 1 within "
                   f"{Z_REPORT:g} standard errors)"]
    else:
        verdict = out[best]["lines"] or ["the difference is not explained by the layers of any "
                                         "kind (it lies within each layer)"]
    also = [f"{k}: {'; '.join(out[k]['lines'])}" for k in out if k != best and out[k]["lines"]]
    return {"kinds": out, "best": best, "verdict": verdict, "also_seen": also}


def explain_frames(reference_path, test_frame, *, mask=None, crop=None) -> dict:
    """--explain for a reference EXR (read with its layers) and a loaded test Frame."""
    from ..io import read_exr
    img = read_exr(reference_path)
    names = img.layers()
    kinds = kinds_of(img.metadata, names)
    layers = {}
    for n in {n for v in kinds.values() for n in v}:
        if f"{n}.variance" not in names:
            raise CompareError(f"--explain: reference layer {n!r} has no variance layer {n}.variance")
        layers[n] = (img.layer(n).astype(np.float64), img.layer(f"{n}.variance").astype(np.float64))
    t, vt = test_frame.rgb, test_frame.variance
    vr = img.layer("variance").astype(np.float64) if "variance" in names else None
    if crop is not None:
        x0, y0, x1, y1 = crop
        cut = (slice(y0, y1), slice(x0, x1))
        layers = {k: (m[cut], v[cut]) for k, (m, v) in layers.items()}
        t = t[cut]
        vt = None if vt is None else vt[cut]
        vr = None if vr is None else vr[cut]
        mask = None if mask is None else mask[cut]
    return explain(layers, t, vt, kinds=kinds, mask=mask, var_ref=vr)


def format_explanation(ex: dict) -> str:
    lines = ["explanation by light-transport layers (test ≈ Σ w_i · reference layer_i):"]
    for kind, fit in ex["kinds"].items():
        mark = "  <- fits best" if kind == ex["best"] else ""
        lines.append(f"  {kind} (χ²/dof {fit['chi2_per_dof']:.3g}){mark}")
        for name, w, se in zip(fit["layers"], fit["weights"], fit["standard_errors"]):
            s = f"{se:.2g}" if math.isfinite(se) else "n/a"
            lines.append(f"    {name:<20} w = {w:.4f} ± {s}")
    lines.append("verdict:")
    lines += [f"  {v}" for v in ex["verdict"]]
    if ex.get("also_seen") and ex["verdict"] and not ex["verdict"][0].startswith("no part"):
        lines.append("as seen by the other decompositions:")
        lines += [f"  {v}" for v in ex["also_seen"]]
    return "\n".join(lines)
