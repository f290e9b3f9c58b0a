"""Terminal table, JSON file and picture report (PNG maps + self-contained HTML)."""
from __future__ import annotations

import base64
import html
import io
import json
import math
import os
from pathlib import Path

import numpy as np

from ..io import atomic_write, atomic_write_bytes
from .metrics import LUMINANCE, METRICS, tonemap

_FMT = {"psnr": "{:.2f}", "ssim": "{:.4f}"}


def _fmt(name, v):
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "–"
    if isinstance(v, float) and math.isinf(v):
        return "inf"
    return _FMT.get(name, "{:.4g}").format(v)


def table(report: dict) -> str:
    """The human summary printed on the terminal."""
    m = report["metrics"]
    inp = report["inputs"]
    lines = [f"reference {inp['reference']}  ({inp['reference_source']}"
             f"{', with variance' if inp['reference_variance'] else ', no variance'})",
             f"test      {inp['test']}  ({inp['test_source']}"
             f"{', with variance' if inp['test_variance'] else ', no variance'})",
             f"{inp['width']}x{inp['height']} pixels, {inp['pixels_compared']} compared"
             + (f", crop {inp['crop']}" if inp["crop"] else "") + (", masked" if inp["masked"] else ""),
             ""]
    head = f"{'metric':<9}" + "".join(f"{c:>12}" for c in "RGBY")
    lines += [head, "-" * len(head)]
    for name in METRICS:
        if name in m:
            lines.append(f"{name:<9}" + "".join(f"{_fmt(name, m[name][c]):>12}" for c in "RGBY"))
    lines.append(f"(relmse/mape/smape eps = {m['eps']:g}; PSNR peak = {m['psnr_peak']:.6g}, "
                 f"max reference luminance; SSIM on {m['ssim_tonemap']})")
    sig = report["significance"]
    lines.append("")
    if sig.get("fraction_significant") is not None and sig.get("n_values"):
        g = sig["global_test"]
        tests = {t["test"]: t for t in sig.get("tests", [])}
        reg, disp = tests.get("regional bias", {}), tests.get("dispersion", {})
        lines.append(f"significance (false-alarm level {sig['alpha']:g}): global bias {g['t']:+.2f} standard "
                     f"errors (p = {g['p']:.2g}); {reg.get('regions', 0)} regions tested, smallest p "
                     f"{reg.get('p', math.nan):.2g}; dispersion z {disp.get('statistic', math.nan):+.2f}")
        lines.append(f"per value: {sig['fraction_significant']:.3%} beyond |t| > 3 "
                     f"({sig['fraction_expected']:.3%} expected under t; descriptive, not in the verdict)")
        rb = sig.get("relative_bias")
        if rb:
            lines.append(f"relative bias of mean luminance: {rb['value']:+.3%} ± {rb['se']:.3%}")
    for note in sig.get("notes", []):
        lines.append(f"note: {note}")
    lines.append(f"verdict: {report['verdict']}")
    if report["diagnoses"]:
        lines.append("diagnosis:")
        for d in report["diagnoses"]:
            lines.append(f"  {d['fault']:<16} confidence {d['confidence']:.2f}  {d['detail']}")
    else:
        lines.append("diagnosis: no classic fault detected")
    return "\n".join(lines)


def _clean(obj):
    """JSON-safe copy: NaN/inf become None / strings, numpy scalars become Python."""
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        v = float(obj)
        if math.isnan(v):
            return None
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return v
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def write_json(path, report: dict) -> None:
    with atomic_write(path, "w") as fh:
        json.dump(_clean(report), fh, indent=1, ensure_ascii=False)
        fh.write("\n")


def _png_bytes(rgb8: np.ndarray) -> bytes:
    import imageio.v3 as iio
    buf = io.BytesIO()
    iio.imwrite(buf, rgb8, extension=".png")
    return buf.getvalue()


def _matplotlib():
    try:
        import matplotlib
    except ImportError:
        from .inputs import CompareError
        raise CompareError("--report: needs matplotlib (pip install -e '.[plots]')") from None
    return matplotlib


def _colormap(values, cmap, vmin, vmax):
    matplotlib = _matplotlib()
    cm = matplotlib.colormaps[cmap]
    x = np.clip((np.nan_to_num(values, nan=0.0) - vmin) / (vmax - vmin), 0, 1)
    rgba = cm(x)
    out = (rgba[..., :3] * 255 + 0.5).astype(np.uint8)
    out[~np.isfinite(values)] = (0, 0, 0)
    return out


#: colour of pixels whose combined variance is zero in the t map (and its bar)
ZERO_VARIANCE_RGB = (0, 160, 60)


def _colorbar_png(cmap, vmin, vmax, label, extra=None):
    os.environ.setdefault("MPLCONFIGDIR", os.path.join(os.environ.get("TMPDIR", "/tmp"), "refrender-mpl"))
    matplotlib = _matplotlib()
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, ax = plt.subplots(figsize=(4.0, 0.8), dpi=100)
    fig.subplots_adjust(bottom=0.62, top=0.95, left=0.05, right=0.95)
    norm = matplotlib.colors.Normalize(vmin=vmin, vmax=vmax)
    fig.colorbar(matplotlib.cm.ScalarMappable(norm=norm, cmap=cmap), cax=ax, orientation="horizontal",
                 label=label)
    if extra is not None:                  # (rgb, text): a swatch beside the bar
        rgb, text = extra
        fig.subplots_adjust(right=0.72)
        sw = fig.add_axes([0.76, 0.62, 0.05, 0.33])
        sw.set_facecolor(tuple(c / 255 for c in rgb))
        sw.set_xticks([])
        sw.set_yticks([])
        fig.text(0.83, 0.78, text, va="center", fontsize=8)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    plt.close(fig)
    return buf.getvalue()


def pictures(reference, test, var_ref=None, var_test=None, *, exposure: float = 0.0, eps: float = 1e-2) -> dict:
    """PNG bytes of the report pictures: name -> (png, caption, colourbar png or None)."""
    from .significance import z_map
    r = np.asarray(reference, dtype=np.float64)
    t = np.asarray(test, dtype=np.float64)
    yr, yt = r @ LUMINANCE, t @ LUMINANCE
    pics = {}
    to8 = lambda x: (tonemap(x, exposure) * 255 + 0.5).astype(np.uint8)
    pics["reference"] = (_png_bytes(to8(r)), "reference (tone-mapped)", None)
    pics["test"] = (_png_bytes(to8(t)), "test (tone-mapped)", None)
    rel = (yt - yr) / (np.abs(yr) + eps)
    lim = float(np.nanpercentile(np.abs(rel[np.isfinite(rel)]), 99)) if np.isfinite(rel).any() else 1.0
    lim = max(lim, 1e-6)
    pics["relative_error"] = (_png_bytes(_colormap(rel, "RdBu_r", -lim, lim)),
                              f"signed relative error of luminance (t − r)/(|r| + {eps:g}); red: test brighter",
                              _colorbar_png("RdBu_r", -lim, lim, "relative error"))
    ab = np.abs(yt - yr)
    amax = float(np.nanpercentile(ab[np.isfinite(ab)], 99)) if np.isfinite(ab).any() else 1.0
    amax = max(amax, 1e-12)
    pics["absolute_error"] = (_png_bytes(_colormap(ab, "magma", 0, amax)),
                              "absolute error of luminance |t − r| (W·m⁻²·sr⁻¹)",
                              _colorbar_png("magma", 0, amax, "absolute error"))
    if var_ref is not None:
        _, zy = z_map(r, t, var_ref, var_test)
        zmap = _colormap(zy, "PuOr_r", -5, 5)
        vsum = np.asarray(var_ref, dtype=np.float64) + (0.0 if var_test is None else np.asarray(var_test))
        zmap[(vsum.sum(axis=-1) == 0)] = ZERO_VARIANCE_RGB
        pics["z"] = (_png_bytes(zmap),
                     "Welch t of luminance (t − r)/√(var_ref + var_test), clipped at ±5 (descriptive: the "
                     "verdict uses the pooled tests); green: zero variance in both frames",
                     _colorbar_png("PuOr_r", -5, 5, "t", extra=(ZERO_VARIANCE_RGB, "zero\nvariance")))
    return pics


def write_report(folder, report: dict, reference, test, var_ref=None, var_test=None, *,
                 exposure: float = 0.0) -> Path:
    """Write PNG maps, ``report.json`` and a self-contained ``index.html`` into ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    pics = pictures(reference, test, var_ref, var_test, exposure=exposure, eps=report["metrics"]["eps"])
    for name, (png, _, bar) in pics.items():
        atomic_write_bytes(folder / f"{name}.png", png)
        if bar is not None:
            atomic_write_bytes(folder / f"{name}_scale.png", bar)
    write_json(folder / "report.json", report)
    page = _html(report, pics)
    with atomic_write(folder / "index.html", "w") as fh:
        fh.write(page)
    return folder / "index.html"


def _img(png: bytes, alt: str, cls: str = "") -> str:
    data = base64.b64encode(png).decode("ascii")
    return f'<img class="{cls}" alt="{html.escape(alt)}" src="data:image/png;base64,{data}">'


def _html(report: dict, pics: dict) -> str:
    m = report["metrics"]
    rows = "".join(f"<tr><th>{n}</th>" + "".join(f"<td>{_fmt(n, m[n][c])}</td>" for c in "RGBY") + "</tr>"
                   for n in METRICS if n in m)
    diags = "".join(f"<li><b>{html.escape(d['fault'])}</b> (confidence {d['confidence']:.2f}): "
                    f"{html.escape(d['detail'])}</li>" for d in report["diagnoses"]) \
        or "<li>no classic fault detected</li>"
    sig = report["significance"]
    notes = "".join(f"<li>{html.escape(n)}</li>" for n in sig.get("notes", []))
    ok = sig.get("significant") is False
    figs = "".join(
        f'<figure>{_img(png, cap)}<figcaption>{html.escape(cap)}</figcaption>'
        + (_img(bar, "colour scale", "bar") if bar else "") + "</figure>"
        for png, cap, bar in pics.values())
    inp = report["inputs"]
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>refrender comparison</title>
<style>
body {{ font-family: sans-serif; margin: 1.5em; color: #222; }}
table {{ border-collapse: collapse; }} td, th {{ padding: 0.2em 0.8em; text-align: right; border-bottom: 1px solid #ddd; }}
.verdict {{ font-size: 1.2em; padding: 0.5em; border-left: 6px solid {'#4a7' if ok else '#c63'}; }}
figure {{ display: inline-block; margin: 0.5em; vertical-align: top; width: 46%; }}
figure img {{ width: 100%; image-rendering: pixelated; }} img.bar {{ width: 60%; }}
figcaption {{ font-size: 0.85em; }}
</style></head><body>
<h1>Comparison of a test frame against its reference</h1>
<p>reference <code>{html.escape(inp['reference'])}</code>, test <code>{html.escape(inp['test'])}</code>,
{inp['width']}×{inp['height']} pixels, {inp['pixels_compared']} compared.</p>
<p class="verdict" id="verdict">{html.escape(report['verdict'])}</p>
<h2>Diagnosis</h2><ul id="diagnoses">{diags}</ul>
<h2>Metrics (linear radiance)</h2>
<table id="metrics"><tr><th></th><th>R</th><th>G</th><th>B</th><th>Y (BT.709)</th></tr>{rows}</table>
<p>relMSE, MAPE and SMAPE use ε = {m['eps']:g}; PSNR peak {m['psnr_peak']:.6g} (the largest reference
luminance); SSIM on {html.escape(m['ssim_tonemap'])}, Gaussian window σ = 1.5, data range 1.</p>
<ul>{notes}</ul>
<h2>Pictures</h2>{figs}
</body></html>
"""
