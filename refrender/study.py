"""Convergence studies: error versus samples and time, rates, efficiency, bias.

One progressive render per configuration and seed: the samples of snapshot k
are ``render(scene, spp=s_k - s_{k-1}, first_sample=s_{k-1})`` merged into the
earlier ones (``refrender.merge``), so no sample is drawn twice and snapshot
``s`` is exactly the ``s``-spp render.  Each snapshot records spp, seconds
(cumulative render time), rays and the error metrics of
:mod:`refrender.compare.metrics` (reused, not re-implemented) against a
reference, together with

- ``predicted_mse``: the mean over pixels and channels of the variance of the
  pixel means (for an unbiased estimator E[MSE against the truth] equals it);
- ``ref_floor``: the same mean of the reference's variance layer (E[MSE
  against a noisy reference] = bias^2 + predicted + floor);
- ``mse_corrected`` = mse - ref_floor (the error against the truth) and
  ``excess`` = mse - predicted - floor, the estimated squared bias, with its
  standard error ``mse_se`` (from the scatter of the squared differences).

``run`` returns plain rows (dicts); ``summarise`` fits the log-log slopes and
ranks the efficiency 1 / (MSE x seconds); ``write_outputs`` writes CSV, JSON
and the plot.  ``python tools/convergence.py`` is the command line.
"""
from __future__ import annotations

import csv
import json
import math
import os
from pathlib import Path

import numpy as np

from .compare import metrics as _metrics
from .errors import RefrenderError

#: metrics recorded by default (functions of refrender.compare.metrics)
DEFAULT_METRICS = ("mse", "rmse", "relmse", "mape", "smape", "bias", "max_abs", "psnr")
#: configuration keys forwarded to refrender.render
CONFIG_KEYS = ("strategy", "light_sampling", "max_bounces", "rr_start")
#: seed of a reference rendered on the fly (independent of the study seeds)
REFERENCE_SEED = 2 ** 31 + 17
#: a configuration is called biased when its final excess MSE exceeds this many standard errors
BIAS_Z = 4.0


class StudyError(RefrenderError, ValueError):
    """A convergence study is set up wrongly (the message names the field)."""


def default_schedule(max_spp: int) -> list:
    """Powers of two 1, 2, 4, ... up to ``max_spp`` (``max_spp`` included)."""
    if not isinstance(max_spp, (int, np.integer)) or isinstance(max_spp, bool) or max_spp < 1:
        raise StudyError(f"max_spp: must be a positive integer, got {max_spp!r}")
    out, s = [], 1
    while s < max_spp:
        out.append(s)
        s *= 2
    out.append(int(max_spp))
    return out


def _check_schedule(schedule) -> list:
    try:
        sched = [int(s) for s in schedule]
    except (TypeError, ValueError):
        raise StudyError(f"schedule: must be a list of integers, got {schedule!r}") from None
    if not sched or sched[0] < 1 or any(b <= a for a, b in zip(sched, sched[1:])):
        raise StudyError(f"schedule: must be strictly increasing positive integers, got {sched}")
    return sched


def _check_configs(configs) -> list:
    if isinstance(configs, dict):
        configs = [configs]
    out = []
    names = set()
    for i, c in enumerate(configs):
        if not isinstance(c, dict):
            raise StudyError(f"configs[{i}]: must be an object, got {type(c).__name__}")
        unknown = set(c) - set(CONFIG_KEYS) - {"name"}
        if unknown:
            raise StudyError(f"configs[{i}].{sorted(unknown)[0]}: unknown key "
                             f"(allowed: name, {', '.join(CONFIG_KEYS)})")
        name = c.get("name") or ",".join(f"{k}={c[k]}" for k in CONFIG_KEYS if k in c) or "default"
        if name in names:
            raise StudyError(f"configs[{i}].name: duplicate name {name!r}")
        names.add(name)
        out.append(dict(c, name=name))
    if not out:
        raise StudyError("configs: give at least one configuration")
    return out


def _reference_arrays(scene, reference, schedule, factor, threads, allow_other_scene=False):
    """(mean, variance or None, description)."""
    from .result import Result
    if reference is None or reference == "render":
        spp = int(factor) * schedule[-1]
        res = _render(scene, {}, spp, 0, REFERENCE_SEED, threads)
        return res.mean, res.variance, f"rendered on the fly: scene defaults, {spp} spp, seed {REFERENCE_SEED}"
    if isinstance(reference, Result):
        return reference.mean, reference.variance, f"Result with {reference.spp} spp"
    if isinstance(reference, (str, os.PathLike)):
        from .compare.inputs import load_frame
        from .compare.inputs import check_same_scene, scene_of
        fr = load_frame(reference)
        check_same_scene(scene_of(fr), scene.sha256, reference_name=f"--reference {reference}",
                         test_name="the studied scene", allow=allow_other_scene)
        return fr.rgb, fr.variance, f"{reference}" + ("" if fr.variance is not None else " (no variance layer)")
    if isinstance(reference, tuple) and len(reference) == 2:
        m = np.asarray(reference[0], dtype=np.float64)
        v = None if reference[1] is None else np.asarray(reference[1], dtype=np.float64)
        return m, v, "arrays"
    raise StudyError("reference: expected an EXR path, a Result, (mean, variance), 'render' or None")


def _render(scene, config, spp, first, seed, threads):
    from .render import render
    kw = {k: config[k] for k in CONFIG_KEYS if k in config}
    return render(scene, spp=spp, first_sample=first, seed=seed, threads=threads, **kw)


def _snapshot_row(acc, ref_mean, ref_var, metric_names, peak):
    mean, var = acc.mean, acc.variance
    row = {"spp": acc.spp, "seconds": float(acc.stats.get("seconds", 0.0)), "rays": int(acc.stats.get("rays", 0))}
    finite_var = np.isfinite(var).all()
    row["predicted_mse"] = float(var.mean()) if finite_var else None
    if ref_mean is None:
        return row
    for name in metric_names:
        fn = getattr(_metrics, name)
        if name == "psnr":
            row[name] = fn(ref_mean, mean, peak=peak) if peak and peak > 0 else None
        else:
            row[name] = fn(ref_mean, mean)
    d2 = (mean - ref_mean) ** 2
    mse = float(d2.mean())
    row["mse"] = mse
    row["mse_se"] = float(d2.std(ddof=1) / math.sqrt(d2.size))
    floor = float(ref_var.mean()) if ref_var is not None else 0.0
    row["ref_floor"] = floor
    row["mse_corrected"] = mse - floor
    if row["predicted_mse"] is not None:
        row["excess"] = mse - row["predicted_mse"] - floor
        row["excess_z"] = row["excess"] / row["mse_se"] if row["mse_se"] > 0 else None
    return row


def run(scene, configs, schedule=None, *, max_spp: int = 256, reference=None, reference_factor: int = 4,
        seeds=(0,), metrics=DEFAULT_METRICS, threads=None, progress=None,
        allow_other_scene: bool = False) -> list:
    """Run a convergence study; returns one plain dict per (config, seed, snapshot).

    Parameters
    ----------
    scene : Scene
        From ``refrender.load_scene``.
    configs : list of dict
        Each with an optional ``name`` and any of ``strategy``, ``light_sampling``,
        ``max_bounces``, ``rr_start`` (others come from the scene's render block).
    schedule : list of int, optional
        Snapshot sample counts (default: powers of two up to ``max_spp``).
    reference : path, Result, (mean, variance), "render" or None
        What the errors are measured against.  ``None`` or ``"render"`` renders
        one at ``reference_factor`` x the largest spp with the scene's own
        settings and seed ``REFERENCE_SEED``.  ``False``: no reference; rows
        then carry only ``predicted_mse``.
    seeds : sequence of int
        Independent runs of every configuration (error bars across seeds).
    metrics : names of functions in ``refrender.compare.metrics``.
    progress : callable, optional
        ``progress(config_name, seed, spp)`` after each snapshot.
    allow_other_scene : bool
        Accept a reference EXR whose ``scene_sha256`` is not the scene's
        (refused by default).
    """
    configs = _check_configs(configs)
    sched = _check_schedule(schedule) if schedule is not None else default_schedule(max_spp)
    seeds = [int(s) for s in seeds]
    if not seeds or len(set(seeds)) != len(seeds):
        raise StudyError(f"seeds: must be distinct integers, got {seeds}")
    for name in metrics:
        if name not in _metrics.METRICS:
            raise StudyError(f"metrics: unknown metric {name!r} (known: {', '.join(_metrics.METRICS)})")
    if not isinstance(reference_factor, int) or reference_factor < 1:
        raise StudyError(f"reference_factor: must be a positive integer, got {reference_factor!r}")
    ref_mean = ref_var = None
    ref_desc = "none"
    if reference is not False:
        if reference in (None, "render") and REFERENCE_SEED in seeds:
            raise StudyError(f"seeds: {REFERENCE_SEED} is the seed of the on-the-fly reference")
        ref_mean, ref_var, ref_desc = _reference_arrays(scene, reference, sched, reference_factor, threads,
                                                         allow_other_scene)
        x0, y0, x1, y1 = scene.film.window
        if ref_mean.shape[:2] != (y1 - y0, x1 - x0):
            raise StudyError(f"reference: {ref_mean.shape[1]}x{ref_mean.shape[0]} does not match the film "
                             f"{x1 - x0}x{y1 - y0}")
    peak = float(_metrics.luminance(ref_mean).max()) if ref_mean is not None else None
    from .result import merge
    rows = []
    for cfg in configs:
        for seed in seeds:
            acc = None
            done = 0
            for target in sched:
                inc = _render(scene, cfg, target - done, done, seed, threads)
                acc = inc if acc is None else merge([acc, inc])
                done = target
                row = {"config": cfg["name"], "seed": seed}
                row.update({k: cfg.get(k) for k in CONFIG_KEYS if k in cfg})
                row.update(_snapshot_row(acc, ref_mean, ref_var, metrics, peak))
                row["reference"] = ref_desc
                rows.append(row)
                if progress is not None:
                    progress(cfg["name"], seed, target)
    return rows


# ----------------------------------------------------------------------------- analysis

#: two-sided 95 % quantiles of Student's t for 1..30 degrees of freedom
#: (standard statistical tables; checked against scipy.stats.t in the tests)
T975 = (12.706, 4.303, 3.182, 2.776, 2.571, 2.447, 2.365, 2.306, 2.262, 2.228, 2.201, 2.179, 2.160,
        2.145, 2.131, 2.120, 2.110, 2.101, 2.093, 2.086, 2.080, 2.074, 2.069, 2.064, 2.060, 2.056,
        2.052, 2.048, 2.045, 2.042)


def _t975(dof: int) -> float:
    return T975[dof - 1] if dof <= len(T975) else 1.96


def fit_slope(x, y, rel_se=None, *, groups=None) -> dict:
    """Slope of log y against log x with a 95 % interval.

    With three or more independent runs (``groups``, one per seed) the slope
    is fitted per run by least squares and the interval comes from the spread
    of those slopes (mean +- t(k-1) sd / sqrt k): no model of the noise is
    needed (``method`` "across seeds").  Otherwise the model-based fit below
    is used (``method`` "model"); it assumes Gaussian pixel errors and
    neglects the reference's own noise, so its interval can be too narrow.

    Points of one progressive run are correlated: the error of the cumulative
    mean after n and m samples has covariance proportional to 1/max(n, m), so
    squared errors (MSE) have correlation min(n, m)/max(n, m).  We fit by
    generalised least squares with that correlation within a ``group`` (one
    run) and independence across groups, scaling by the per-point relative
    standard errors ``rel_se`` (of y); the interval is +-1.96 standard errors.
    Without ``rel_se`` ordinary least squares with the residual scatter is used.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    ok = (x > 0) & (y > 0) & np.isfinite(x) & np.isfinite(y)
    groups = np.zeros(x.size, dtype=int) if groups is None else np.asarray(groups)
    if rel_se is not None:
        rel_se = np.asarray(rel_se, dtype=np.float64)
        ok &= np.isfinite(rel_se) & (rel_se > 0)
    x, y, groups = x[ok], y[ok], groups[ok]
    if x.size < 3:
        return {"slope": None, "se": None, "ci95": None, "n": int(x.size), "method": None}
    lx, ly = np.log(x), np.log(y)
    per = []
    for g in np.unique(groups):
        idx = groups == g
        if idx.sum() >= 3 and np.ptp(lx[idx]) > 0:
            per.append(float(np.polyfit(lx[idx], ly[idx], 1)[0]))
    if len(per) >= 3:
        k = len(per)
        b = float(np.mean(per))
        se = float(np.std(per, ddof=1) / math.sqrt(k))
        h = _t975(k - 1) * se
        return {"slope": b, "se": se, "ci95": [b - h, b + h], "n": int(x.size), "runs": k,
                "method": "across seeds"}
    X = np.column_stack([np.ones_like(lx), lx])
    if rel_se is None:
        beta, res, *_ = np.linalg.lstsq(X, ly, rcond=None)
        dof = x.size - 2
        s2 = float(np.sum((ly - X @ beta) ** 2) / dof)
        cov = s2 * np.linalg.inv(X.T @ X)
    else:
        rs = rel_se[ok]
        C = np.zeros((x.size, x.size))
        for g in np.unique(groups):
            idx = np.nonzero(groups == g)[0]
            xi = x[idx]
            R = np.minimum.outer(xi, xi) / np.maximum.outer(xi, xi)
            C[np.ix_(idx, idx)] = R * np.outer(rs[idx], rs[idx])
        Ci = np.linalg.inv(C)
        cov = np.linalg.inv(X.T @ Ci @ X)
        beta = cov @ X.T @ Ci @ ly
    se = float(math.sqrt(cov[1, 1]))
    b = float(beta[1])
    return {"slope": b, "se": se, "ci95": [b - 1.96 * se, b + 1.96 * se], "n": int(x.size),
            "runs": len(np.unique(groups)), "method": "model"}


def summarise(rows, *, min_spp: int = 2) -> list:
    """One summary per configuration: final errors (mean over seeds and their
    standard error), slopes of MSE (floor-subtracted) against spp and seconds,
    the slope of the predicted MSE, efficiency 1 / (MSE x seconds) and its
    rank, and the bias verdict with the estimated squared bias."""
    out = []
    names = list(dict.fromkeys(r["config"] for r in rows))
    for name in names:
        rs = [r for r in rows if r["config"] == name]
        seeds = sorted({r["seed"] for r in rs})
        last_spp = max(r["spp"] for r in rs)
        final = [r for r in rs if r["spp"] == last_spp]
        fit_rows = [r for r in rs if r["spp"] >= min_spp]
        s = {"config": name, "seeds": len(seeds), "spp": last_spp,
             "seconds": float(np.mean([r["seconds"] for r in final])),
             "rays": float(np.mean([r["rays"] for r in final]))}
        for k in CONFIG_KEYS:
            if k in rs[0]:
                s[k] = rs[0][k]
        has_ref = "mse" in final[0]
        pred = [r["predicted_mse"] for r in final if r.get("predicted_mse") is not None]
        s["predicted_mse"] = float(np.mean(pred)) if pred else None
        gid = {sd: i for i, sd in enumerate(seeds)}
        if pred:
            pr = [r for r in fit_rows if r.get("predicted_mse")]
            s["slope_predicted"] = fit_slope([r["spp"] for r in pr], [r["predicted_mse"] for r in pr],
                                             groups=[gid[r["seed"]] for r in pr])
        if has_ref:
            m = np.array([r["mse"] for r in final])
            s["mse"] = float(m.mean())
            s["mse_seed_se"] = float(m.std(ddof=1) / math.sqrt(m.size)) if m.size > 1 else None
            s["ref_floor"] = final[0]["ref_floor"]
            mc = np.array([r["mse_corrected"] for r in final])
            s["mse_corrected"] = float(mc.mean())
            for k in ("relmse", "psnr", "mape"):
                if k in final[0]:
                    s[k] = float(np.mean([r[k] for r in final]))
            fr = [r for r in fit_rows if r["mse_corrected"] > 0]
            rel = [r["mse_se"] / r["mse_corrected"] for r in fr]
            grp = [gid[r["seed"]] for r in fr]
            s["slope_spp"] = fit_slope([r["spp"] for r in fr], [r["mse_corrected"] for r in fr], rel, groups=grp)
            s["slope_seconds"] = fit_slope([r["seconds"] for r in fr], [r["mse_corrected"] for r in fr], rel,
                                           groups=grp)
            # bias: pooled over seeds at the final snapshot
            exc = np.array([r.get("excess", math.nan) for r in final])
            se = np.array([r["mse_se"] for r in final])
            if np.isfinite(exc).all():
                e = float(exc.mean())
                e_se = float(math.sqrt(np.sum(se ** 2)) / se.size)
                s["bias_squared"] = e
                s["bias_squared_se"] = e_se
                s["bias_z"] = e / e_se if e_se > 0 else None
                plateau = (s.get("slope_spp", {}).get("slope") is not None and s["slope_predicted"]["slope"] is not None
                           and s["slope_spp"]["slope"] > s["slope_predicted"]["slope"] + 0.25)
                s["plateau"] = bool(plateau)
                s["biased"] = bool(s["bias_z"] is not None and s["bias_z"] > BIAS_Z)
                if s["biased"]:
                    s["bias_note"] = (f"biased: measured MSE exceeds the variance-predicted MSE plus the reference "
                                      f"floor by {e:.3g} ± {e_se:.2g} (squared bias per value, {s['bias_z']:.1f} "
                                      "standard errors)" + ("; its error stops falling while its variance keeps "
                                                             "falling" if plateau else ""))
                else:
                    s["bias_note"] = "consistent with unbiased (measured MSE = predicted + reference floor)"
            base = s["mse_corrected"] if s["mse_corrected"] > 0 else s["mse"]
            s["efficiency"] = 1.0 / (base * s["seconds"]) if base > 0 and s["seconds"] > 0 else None
        elif s["predicted_mse"]:
            s["efficiency"] = 1.0 / (s["predicted_mse"] * s["seconds"]) if s["seconds"] > 0 else None
        out.append(s)
    # biased configurations converge to the wrong image: they are not ranked
    ranked = sorted([s for s in out if s.get("efficiency") and not s.get("biased")], key=lambda s: -s["efficiency"])
    for i, s in enumerate(ranked, start=1):
        s["efficiency_rank"] = i
    return out


# ----------------------------------------------------------------------------- outputs

def _jsonable(v):
    if isinstance(v, float) and not math.isfinite(v):
        return None if math.isnan(v) else ("inf" if v > 0 else "-inf")
    if isinstance(v, dict):
        return {k: _jsonable(x) for k, x in v.items()}
    if isinstance(v, list):
        return [_jsonable(x) for x in v]
    if isinstance(v, np.generic):
        return v.item()
    return v


def write_csv(path, rows) -> None:
    from .io import atomic_write
    keys = list(dict.fromkeys(k for r in rows for k in r))
    with atomic_write(path, "w") as fh:
        w = csv.DictWriter(fh, fieldnames=keys, lineterminator="\n")
        w.writeheader()
        for r in rows:
            w.writerow({k: _flat(r.get(k)) for k in keys})


def _flat(v):
    if isinstance(v, dict):
        return v.get("slope")
    if isinstance(v, list):
        return " ".join(str(x) for x in v)
    return "" if v is None else v


def summary_table(summary) -> str:
    """A plain-text table of the summaries (ranked by efficiency)."""
    head = (f"{'config':<22}{'spp':>6}{'seconds':>9}{'MSE':>11}{'relMSE':>10}{'slope/spp (95% CI)':>24}"
            f"{'efficiency':>12}{'rank':>6}  bias")
    lines = [head, "-" * (len(head) + 20)]
    for s in sorted(summary, key=lambda s: s.get("efficiency_rank", 1e9)):
        sl = s.get("slope_spp") or {}
        ci = f"{sl['slope']:+.3f} [{sl['ci95'][0]:+.2f}, {sl['ci95'][1]:+.2f}]" if sl.get("slope") is not None else "–"
        mse = s.get("mse_corrected", s.get("predicted_mse"))
        bias = ("BIASED, b² ≈ " + f"{s['bias_squared']:.2g}") if s.get("biased") else (
            "ok" if "biased" in s else "–")
        lines.append(f"{s['config']:<22}{s['spp']:>6}{s['seconds']:>9.2f}{mse if mse is not None else math.nan:>11.3g}"
                     f"{s.get('relmse', math.nan):>10.3g}{ci:>24}{s.get('efficiency') or math.nan:>12.4g}"
                     f"{s.get('efficiency_rank', '–'):>6}  {bias}")
    return "\n".join(lines)


def plot(path, rows, *, title: str = "convergence") -> None:
    """Log-log plot: MSE (floor-subtracted; dotted: variance-predicted) against
    spp and against seconds, one line per configuration, error bars across seeds."""
    os.environ.setdefault("MPLCONFIGDIR", os.path.join(os.environ.get("TMPDIR", "/tmp"), "refrender-mpl"))
    try:
        import matplotlib
    except ImportError:
        raise StudyError("plot: needs matplotlib (pip install -e '.[plots]')") from None
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from .io import atomic_path
    has_ref = any("mse" in r for r in rows)
    key = "mse_corrected" if has_ref else "predicted_mse"
    fig, axes = plt.subplots(1, 2, figsize=(11, 4.4), dpi=110)
    names = list(dict.fromkeys(r["config"] for r in rows))
    for i, name in enumerate(names):
        colour = f"C{i % 10}"
        rs = [r for r in rows if r["config"] == name]
        spps = sorted({r["spp"] for r in rs})
        for ax, xkey in zip(axes, ("spp", "seconds")):
            xs, ys, es, ps = [], [], [], []
            for s in spps:
                at = [r for r in rs if r["spp"] == s and r.get(key) is not None]
                if not at:
                    continue
                v = np.array([r[key] for r in at], dtype=float)
                xs.append(float(np.mean([r[xkey] for r in at])))
                ys.append(v.mean())
                es.append(v.std(ddof=1) / math.sqrt(v.size) if v.size > 1 else 0.0)
                p = [r["predicted_mse"] for r in at if r.get("predicted_mse") is not None]
                ps.append(float(np.mean(p)) if p else np.nan)
            xs, ys, es = np.array(xs), np.array(ys), np.array(es)
            good = (ys > 0) & (xs > 0)
            ax.errorbar(xs[good], ys[good], yerr=es[good], color=colour, marker="o", ms=3, capsize=2, label=name)
            if has_ref:
                ax.plot(xs, ps, color=colour, ls=":", lw=1)
    for ax, lab in zip(axes, ("samples per pixel", "seconds")):
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel(lab)
        ax.grid(True, which="both", alpha=0.3)
    # the expected rate as a guide
    xs = np.array(sorted({r["spp"] for r in rows}), dtype=float)
    ref_y = [r[key] for r in rows if r["spp"] == xs[0] and r.get(key)]
    if ref_y and xs.size > 1:
        axes[0].plot(xs, np.mean(ref_y) * xs[0] / xs, color="grey", ls="--", lw=0.8, label="slope −1")
    axes[0].set_ylabel("MSE − reference floor" if has_ref else "variance-predicted MSE")
    axes[0].legend(fontsize=8)
    fig.suptitle(title + (" (dotted: variance-predicted MSE)" if has_ref else ""))
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")
    plt.close(fig)


def write_outputs(folder, rows, summary=None, *, title="convergence") -> dict:
    """``rows.csv``, ``rows.json``, ``summary.csv``, ``summary.json`` and ``convergence.png`` in ``folder``."""
    from .io import atomic_write
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    summary = summarise(rows) if summary is None else summary
    write_csv(folder / "rows.csv", rows)
    write_csv(folder / "summary.csv", summary)
    for name, obj in (("rows.json", rows), ("summary.json", summary)):
        with atomic_write(folder / name, "w") as fh:
            json.dump(_jsonable(obj), fh, indent=1, ensure_ascii=False)
            fh.write("\n")
    plot(folder / "convergence.png", rows, title=title)
    return {k: folder / k for k in ("rows.csv", "rows.json", "summary.csv", "summary.json", "convergence.png")}


# ----------------------------------------------------------------------------- study files

STUDY_KEYS = {"scene", "configs", "schedule", "max_spp", "seeds", "reference", "reference_factor",
              "metrics", "film", "title"}


def load_study(path) -> dict:
    """Read a study file (JSON; see README "Convergence studies").  Returns the
    keyword arguments of :func:`run` plus ``scene`` (a Scene) and ``title``."""
    path = Path(path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise StudyError(f"{path}: no such file") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise StudyError(f"{path}: not valid JSON ({exc})") from None
    if not isinstance(doc, dict):
        raise StudyError(f"{path}: a study file is a JSON object")
    unknown = set(doc) - STUDY_KEYS
    if unknown:
        raise StudyError(f"{sorted(unknown)[0]}: unknown key in the study file (allowed: {', '.join(sorted(STUDY_KEYS))})")
    if "scene" not in doc or "configs" not in doc:
        raise StudyError(f"{'scene' if 'scene' not in doc else 'configs'}: required in the study file")
    return prepare(doc, base_dir=path.parent)


def prepare(doc: dict, base_dir=".") -> dict:
    """Turn a study document (dict) into ``run`` arguments."""
    from . import load_scene
    base = Path(base_dir)
    scene_src = doc["scene"]
    if isinstance(scene_src, str):
        sp = Path(scene_src)
        sp = sp if sp.is_absolute() else base / sp
        if not sp.is_file():
            raise StudyError(f"scene: no such file {sp}")
        try:
            scene_doc = json.loads(sp.read_text(encoding="utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise StudyError(f"scene: {sp} is not valid JSON ({exc})") from None
        scene_base = sp.parent
    elif isinstance(scene_src, dict):
        scene_doc, scene_base = dict(scene_src), base
    else:
        raise StudyError("scene: must be a path or a scene object")
    if "film" in doc:
        scene_doc = dict(scene_doc, film=doc["film"])
    scene = load_scene(scene_doc, base_dir=scene_base)
    kw = {"scene": scene, "configs": _check_configs(doc["configs"]), "title": doc.get("title", "convergence")}
    for k in ("schedule", "max_spp", "seeds", "reference_factor", "metrics"):
        if k in doc:
            kw[k] = doc[k]
    if "reference" in doc:
        ref = doc["reference"]
        if isinstance(ref, str) and ref not in ("render",):
            rp = Path(ref)
            ref = str(rp if rp.is_absolute() else base / rp)
        elif ref is not None and ref is not False and ref != "render":
            raise StudyError("reference: a path to an EXR, \"render\", null or false")
        kw["reference"] = ref
    return kw


# ----------------------------------------------------------------------------- command line

def _parse_config(text: str) -> dict:
    """``NAME:key=value,key=value`` or ``key=value,...`` -> config dict."""
    name, _, rest = text.partition(":") if ":" in text else ("", "", text)
    cfg = {"name": name} if name else {}
    for part in filter(None, (p.strip() for p in rest.split(","))):
        key, eq, val = part.partition("=")
        key = key.strip().replace("-", "_")
        if not eq or key not in CONFIG_KEYS:
            raise StudyError(f"--config: expected key=value with key in {', '.join(CONFIG_KEYS)}, got {part!r}")
        val = val.strip()
        if key in ("max_bounces", "rr_start"):
            if key == "max_bounces" and val.lower() in ("none", "null", "inf"):
                cfg[key] = None
                continue
            try:
                cfg[key] = int(val)
            except ValueError:
                raise StudyError(f"--config: {key} must be an integer, got {val!r}") from None
        else:
            cfg[key] = val
    return cfg


def main(argv=None) -> int:
    """``python tools/convergence.py``: exit 0, 1 with ``--fail-if-biased`` when a
    configuration is biased, 2 on bad input."""
    import argparse
    import sys
    import warnings
    p = argparse.ArgumentParser(prog="convergence.py", description="Convergence study: error against samples "
                                "and time, slopes, efficiency and a bias detector.")
    p.add_argument("scene", nargs="?", help="scene JSON (or give --study)")
    p.add_argument("--study", metavar="FILE", help="study file (JSON): scene, configs, schedule, seeds, reference")
    p.add_argument("--config", action="append", default=[], metavar="NAME:key=value,...",
                   help="a configuration, e.g. 'nee-area:strategy=nee,light_sampling=area' (repeatable; keys: "
                   + ", ".join(CONFIG_KEYS) + ")")
    p.add_argument("--max-spp", type=int, default=256, help="largest snapshot (default 256; powers of two up to it)")
    p.add_argument("--schedule", help="explicit snapshot spp list, e.g. 4,16,64,256")
    p.add_argument("--seeds", default="0", help="seeds of independent runs, e.g. 0,1,2 (default 0)")
    p.add_argument("--reference", help="reference EXR; default: render one at --reference-factor x max spp")
    p.add_argument("--reference-factor", type=int, default=4)
    p.add_argument("--allow-other-scene", action="store_true",
                   help="accept a --reference EXR rendered from another scene (scene_sha256 differs)")
    p.add_argument("--no-reference", action="store_true", help="variance-predicted MSE only")
    p.add_argument("--film", metavar="WxH", help="override the film size (quick studies)")
    p.add_argument("--out", "-o", default="convergence", help="output folder (default ./convergence)")
    p.add_argument("--fail-if-biased", action="store_true", help="exit 1 when a configuration is flagged biased")
    p.add_argument("--quiet", action="store_true")
    try:
        args = p.parse_args(argv)
    except SystemExit as exc:
        return 2 if exc.code else 0
    old = warnings.showwarning
    warnings.showwarning = lambda m, *a, **k: print(f"convergence: warning: {m}", file=sys.stderr)
    try:
        if args.study:
            kw = load_study(args.study)
        else:
            if not args.scene:
                raise StudyError("scene: give a scene file or --study FILE")
            doc = {"scene": args.scene, "configs": [_parse_config(c) for c in args.config] or [{"name": "default"}]}
            if args.film:
                try:
                    w, h = (int(v) for v in args.film.lower().split("x"))
                except ValueError:
                    raise StudyError(f"--film: expected WxH, got {args.film!r}") from None
                doc["film"] = {"width": w, "height": h}
            kw = prepare(doc, base_dir=".")
            kw["max_spp"] = args.max_spp
            if args.schedule:
                try:
                    kw["schedule"] = [int(v) for v in args.schedule.split(",")]
                except ValueError:
                    raise StudyError(f"--schedule: expected integers, got {args.schedule!r}") from None
            try:
                kw["seeds"] = [int(v) for v in args.seeds.split(",")]
            except ValueError:
                raise StudyError(f"--seeds: expected integers, got {args.seeds!r}") from None
            kw["reference"] = False if args.no_reference else (args.reference or None)
            kw["reference_factor"] = args.reference_factor
        title = kw.pop("title", "convergence")
        scene = kw.pop("scene")
        configs = kw.pop("configs")
        bar = None
        if not args.quiet and sys.stderr.isatty():
            from tqdm import tqdm
            n = len(configs) * len(kw.get("seeds", [0])) * len(
                kw.get("schedule") or default_schedule(kw.get("max_spp", 256)))
            bar = tqdm(total=n, unit="snapshot", file=sys.stderr)
        rows = run(scene, configs, allow_other_scene=args.allow_other_scene,
                   progress=(lambda *a: bar.update(1)) if bar else None, **kw)
        if bar:
            bar.close()
        summary = summarise(rows)
        paths = write_outputs(args.out, rows, summary, title=title)
        if not args.quiet:
            print(summary_table(summary))
            for s in summary:
                if s.get("biased"):
                    print(f"{s['config']}: {s['bias_note']}")
            print(f"wrote {', '.join(str(v) for v in paths.values())}")
        return 1 if args.fail_if_biased and any(s.get("biased") for s in summary) else 0
    except RefrenderError as exc:
        print(f"convergence: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("convergence: interrupted", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = old
