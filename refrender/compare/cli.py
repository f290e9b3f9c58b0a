"""Command line of the diff tool: ``python tools/diff.py REFERENCE TEST [options]``.

Exit status: 0 = compared (and no ``--fail-if`` condition holds), 1 = a
``--fail-if`` condition holds, 2 = bad input (one line on stderr).
"""
from __future__ import annotations

import argparse
import sys
import warnings

from ..cli.oneline import OneLineArgumentParser
from ..errors import RefrenderError
from .metrics import METRICS


def parser() -> argparse.ArgumentParser:
    p = OneLineArgumentParser(   # argument errors as one line, not the usage block
        prog="diff.py", description="Compare a test frame with a refrender reference, pixel by pixel: "
        "metrics, significance against both frames' noise, diagnosis of classic faults.")
    p.add_argument("reference", help="reference image (refrender EXR with its variance layer, or any linear image)")
    p.add_argument("test", help="test frame: EXR, PFM, HDR, float TIFF, NPY, or PNG/JPEG (assumed sRGB)")
    p.add_argument("--layer", help="test EXR: compare the layer LAYER (channels LAYER.R/G/B)")
    p.add_argument("--channels", help="test EXR: three channel names, e.g. diffuse.R,diffuse.G,diffuse.B")
    p.add_argument("--reference-layer", help="reference EXR: compare this layer instead of R, G, B")
    p.add_argument("--crop", metavar="X0,Y0,X1,Y1", help="compare only this half-open pixel window")
    p.add_argument("--mask", metavar="IMAGE", help="compare only pixels whose mask value is > 0")
    p.add_argument("--tolerance", type=float, metavar="REL",
                   help="relative per-pixel difference you need to resolve (warns if the reference is too noisy)")
    p.add_argument("--eps", type=float, default=1e-2, help="stabilising constant of relmse/mape/smape (default 0.01)")
    p.add_argument("--peak", type=float, help="PSNR peak (default: the largest reference luminance)")
    p.add_argument("--exposure", type=float, default=0.0, help="stops applied before tone mapping (SSIM, pictures)")
    p.add_argument("--grid", default="8x8", metavar="NXxNY", help="regions of the regional bias test (default 8x8)")
    p.add_argument("--json", metavar="FILE", help="write every metric, the verdict and the diagnoses as JSON")
    p.add_argument("--report", metavar="DIR", help="write PNG maps and a self-contained index.html")
    p.add_argument("--fail-if", action="append", default=[], metavar="COND",
                   help="exit 1 if COND holds, e.g. 'relmse>0.01', 'psnr.R<30', 'bias_z>4', 'significant' "
                   "(repeatable; metric[.R|.G|.B|.Y] OP value, Y by default)")
    p.add_argument("--alpha", type=float, default=None, metavar="P",
                   help="false-alarm level of the verdict 'significant' (default 0.002): the probability "
                   "that two unbiased frames of the same scene are called significant")
    p.add_argument("--allow-other-scene", action="store_true",
                   help="compare even when the frames' scene_sha256 differ")
    p.add_argument("--quiet", action="store_true", help="print only failed conditions and errors")
    p.add_argument("--explain", action="store_true",
                   help="explain the difference by the reference's light-transport layers (weighted "
                   "least-squares weight of each layer with its standard error)")
    p.add_argument("--convert", action="store_true",
                   help="convert a test frame whose colour space (OpenEXR chromaticities) differs "
                   "from the reference's, instead of refusing it")
    return p


def run(args) -> int:
    from .core import EXTRA_QUANTITIES, compare, failed_conditions, parse_condition
    from .inputs import (CompareError, check_same_scene, check_sizes, load_frame, load_mask, parse_crop,
                         scene_of)
    from .significance import DEFAULT_ALPHA
    from .report import table, write_json, write_report
    for cond in args.fail_if:
        name = parse_condition(cond)[0]
        if name != "significant" and name not in METRICS and name not in EXTRA_QUANTITIES:
            raise CompareError(f"--fail-if: unknown quantity {name!r} in {cond!r} "
                               f"(use {', '.join(METRICS + EXTRA_QUANTITIES)} or 'significant')")
    try:
        gx, gy = (int(v) for v in args.grid.lower().split("x"))
        if gx < 1 or gy < 1:
            raise ValueError
    except ValueError:
        raise CompareError(f"--grid: expected NXxNY with positive integers, got {args.grid!r}") from None
    for name in ("eps", "peak"):
        v = getattr(args, name)
        if v is not None and not v > 0:
            raise CompareError(f"--{name}: must be > 0, got {v}")
    if args.tolerance is not None and not args.tolerance > 0:
        raise CompareError(f"--tolerance: must be > 0, got {args.tolerance}")
    ref = load_frame(args.reference, layer=args.reference_layer)
    test = load_frame(args.test, layer=args.layer, channels=args.channels)
    scene_note = check_same_scene(scene_of(ref), scene_of(test), reference_name=f"reference {args.reference}",
                                  test_name=f"test {args.test}", allow=args.allow_other_scene)
    check_sizes(ref, test)
    from .faults import reconcile_spaces
    test = reconcile_spaces(ref, test, convert=args.convert)
    alpha = DEFAULT_ALPHA if args.alpha is None else args.alpha
    if not 0 < alpha < 1:
        raise CompareError(f"--alpha: must be in (0, 1), got {args.alpha}")
    crop = parse_crop(args.crop, ref.rgb.shape) if args.crop else None
    mask = load_mask(args.mask, ref.rgb.shape) if args.mask else None
    rep = compare(ref, test, mask=mask, crop=crop, tolerance=args.tolerance, eps=args.eps, peak=args.peak,
                  exposure=args.exposure, grid=(gy, gx), alpha=alpha)
    if scene_note:
        rep["significance"].setdefault("notes", []).append(scene_note)
    explanation = None
    if args.explain:
        from .explain import explain_frames, format_explanation
        if not str(args.reference).lower().endswith(".exr"):
            raise CompareError("--explain: the reference must be a refrender EXR with layers")
        rep["explanation"] = explain_frames(args.reference, test, mask=mask, crop=crop)
        explanation = format_explanation(rep["explanation"])
    failed = failed_conditions(rep, args.fail_if)
    rep["gating"] = {"conditions": list(args.fail_if), "failed": failed}
    if args.json:
        write_json(args.json, rep)
    if args.report:
        r, t, vr, vt = ref.rgb, test.rgb, ref.variance, test.variance
        if crop is not None:
            x0, y0, x1, y1 = crop
            cut = (slice(y0, y1), slice(x0, x1))
            r, t = r[cut], t[cut]
            vr = None if vr is None else vr[cut]
            vt = None if vt is None else vt[cut]
        page = write_report(args.report, rep, r, t, vr, vt, exposure=args.exposure)
    if not args.quiet:
        print(table(rep))
        if explanation:
            print(explanation)
        if args.report:
            print(f"report: {page}")
    for f in failed:
        print(f"diff: condition holds: {f}", file=sys.stderr)
    return 1 if failed else 0


def _warning_line(message, category, filename, lineno, file=None, line=None):
    print(f"diff: warning: {message}", file=sys.stderr)


def main(argv=None) -> int:
    p = parser()
    try:
        args = p.parse_args(argv)
    except SystemExit as exc:
        return 2 if exc.code else 0
    old = warnings.showwarning
    warnings.showwarning = _warning_line
    try:
        return run(args)
    except RefrenderError as exc:
        print(f"diff: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("diff: interrupted", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = old
