"""Running the cases of a suite: reference (cached), frame under test, comparison, gates.

A case ends in one of three states:

- ``pass``: compared, and no ``fail_if`` gate holds;
- ``fail``: compared, and a gate holds (the verdict and diagnosis say why);
- ``error``: no comparison was possible (the frame command failed or timed
  out, the frame is missing, unreadable or of another size).

The comparison is :func:`refrender.compare.compare` and the gates are
:func:`refrender.compare.failed_conditions`, the same code as ``tools/diff.py``.
"""
from __future__ import annotations

import shlex
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from ..compare.report import _clean
from ..errors import RefrenderError
from .cache import ReferenceCache
from .spec import Case, Suite

#: per-case numbers kept in the JSON, the report table and the history
SUMMARY_METRICS = ("relmse", "rmse", "mape", "bias", "psnr", "ssim")


def _substitute(part: str, values: dict) -> str:
    for k, v in values.items():
        part = part.replace("{" + k + "}", v)
    return part


def frame_for(case: Case, suite: Suite, work: Path) -> tuple[Path, dict]:
    """The frame under test of a case: its file, or the output of its command.

    Returns (path, record); raises RefrenderError with the reason when there is none.
    """
    if case.frame is not None:
        if not case.frame.is_file():
            raise RefrenderError(f"frame not found: {case.frame}")
        return case.frame, {"frame": str(case.frame)}
    work.mkdir(parents=True, exist_ok=True)
    out = work / f"frame{case.frame_suffix}"
    if out.exists():
        out.unlink()                 # never compare a frame left by an earlier run
    values = {"scene": str(case.scene_path.resolve()), "frame": str(out.resolve()), "case": case.name,
              "suite_dir": str(suite.path.resolve().parent), "python": sys.executable}
    cmd = [_substitute(p, values) for p in case.frame_command]
    rec = {"frame": str(out), "command": shlex.join(cmd)}
    t0 = time.perf_counter()
    try:
        res = subprocess.run(cmd, cwd=suite.path.resolve().parent, capture_output=True, text=True,
                             timeout=case.frame_timeout, stdin=subprocess.DEVNULL)
    except FileNotFoundError:
        raise RefrenderError(f"frame command not found: {cmd[0]!r}") from None
    except PermissionError:
        raise RefrenderError(f"frame command is not executable: {cmd[0]!r}") from None
    except subprocess.TimeoutExpired:
        raise RefrenderError(f"frame command timed out after {case.frame_timeout:g} s") from None
    rec["command_seconds"] = time.perf_counter() - t0
    rec["command_output"] = (res.stdout + res.stderr)[-4000:]
    if res.returncode != 0:
        last = [line for line in (res.stderr or res.stdout).splitlines() if line.strip()]
        raise RefrenderError(f"frame command exited with status {res.returncode}"
                             + (f": {last[-1].strip()}" if last else ""))
    if not out.is_file():
        raise RefrenderError(f"frame command exited 0 but wrote no {out.name}")
    return out, rec


def summary_metrics(rep: dict) -> dict:
    """The compact per-case numbers (luminance channel) of a comparison report."""
    from ..compare.core import value_of
    m = {name: _num(rep["metrics"][name]["Y"]) for name in SUMMARY_METRICS if name in rep["metrics"]}
    sig = rep["significance"]
    m["bias_z"] = _num(value_of(rep, "bias_z")) if sig.get("global_test") else None
    g = sig.get("global_test") or {}
    m["bias_t"] = _num(g.get("t"))
    rb = sig.get("relative_bias") or {}
    m["relative_bias"] = _num(rb.get("value"))
    m["relative_bias_se"] = _num(rb.get("se"))
    m["fraction_significant"] = _num(sig.get("fraction_significant"))
    return m


def _num(v):
    """A metric as JSON writes it (NaN -> None, infinities as strings), as the diff report does."""
    return None if v is None else _clean(float(v))


def run_case(case: Case, suite: Suite, cache: ReferenceCache, *, work: Path, report_dir: Path | None,
             update: bool = False, keep_other_kernels: bool = False, client=None, log=None) -> dict:
    """Run one case; returns its JSON-ready record (see the module docstring for ``status``)."""
    from ..compare import compare, failed_conditions, load_frame
    from ..compare.inputs import check_sizes
    t0 = time.perf_counter()
    rec = {"name": case.name, "tags": case.tags, "description": case.description,
           "scene": str(case.scene_path), "scene_sha256": case.scene.sha256, "fail_if": case.fail_if,
           "crop": None if case.crop is None else list(case.crop),
           "mask": None if case.mask_path is None else str(case.mask_path),
           "status": "error", "message": "", "failed": [], "metrics": {}, "verdict": None,
           "significant": None, "diagnoses": [], "report": None}
    ref = cache.get(case.scene, case.reference, update=update, keep_other_kernels=keep_other_kernels,
                    client=client, log=log)
    rec["reference"] = {"path": str(ref.exr), "key": ref.key, "cache": ref.status, "spp": ref.spp,
                        "kernel_sha256": ref.kernel_sha256, "render_seconds": ref.seconds}
    try:
        frame_path, frec = frame_for(case, suite, work / case.name)
        rec.update(frec)
        reference = load_frame(ref.exr)
        test = load_frame(frame_path)
        check_sizes(reference, test)
        rep = compare(reference, test, mask=case.mask, crop=case.crop, tolerance=case.tolerance)
    except RefrenderError as exc:
        rec["message"] = str(exc)
        rec["seconds"] = time.perf_counter() - t0
        return rec
    failed = failed_conditions(rep, case.fail_if)
    rep["gating"] = {"conditions": list(case.fail_if), "failed": failed}
    rec.update(status="fail" if failed else "pass", failed=failed, metrics=summary_metrics(rep),
               verdict=rep["verdict"], significant=rep["significance"].get("significant"),
               diagnoses=[{"fault": d["fault"], "confidence": _num(d["confidence"]), "detail": d["detail"]}
                          for d in rep["diagnoses"]],
               notes=list(rep["significance"].get("notes", [])),
               pixels_compared=rep["inputs"]["pixels_compared"],
               message="; ".join(failed) if failed else "")
    if report_dir is not None:
        from ..compare.report import write_report
        r, t, vr, vt = reference.rgb, test.rgb, reference.variance, test.variance
        if case.crop is not None:
            x0, y0, x1, y1 = case.crop
            cut = (slice(y0, y1), slice(x0, x1))
            r, t = r[cut], t[cut]
            vr = None if vr is None else vr[cut]
            vt = None if vt is None else vt[cut]
        folder = report_dir / "cases" / case.name
        write_report(folder, rep, r, t, vr, vt)
        rec["report"] = f"cases/{case.name}/index.html"
    rec["seconds"] = time.perf_counter() - t0
    return rec


def run_suite(suite: Suite, cases, *, cache_dir=None, report_dir=None, update: bool = False,
              keep_other_kernels: bool = False, client=None, log=None, label=None) -> dict:
    """Run ``cases`` of ``suite`` in order; returns the run record (JSON-ready)."""
    cache = ReferenceCache(cache_dir or suite.cache)
    report_dir = None if report_dir is None else Path(report_dir)
    t0 = time.perf_counter()
    started = time.strftime("%Y-%m-%dT%H:%M:%S%z")
    with tempfile.TemporaryDirectory(prefix="refrender-suite-") as tmp:
        work = report_dir / "frames" if report_dir is not None else Path(tmp)
        records = []
        for case in cases:
            if log is not None:
                log(f"case {case.name}")
            rec = run_case(case, suite, cache, work=work, report_dir=report_dir, update=update,
                           keep_other_kernels=keep_other_kernels, client=client, log=log)
            if report_dir is None and rec.get("frame", "").startswith(tmp):
                rec["frame"] = None     # a temporary file, gone after the run
            records.append(rec)
            if log is not None:
                log(f"  {rec['status']}" + (f": {rec['message']}" if rec["message"] else ""))
    counts = {s: sum(r["status"] == s for r in records) for s in ("pass", "fail", "error")}
    from .. import __version__
    from ..overnight import kernel_sha256
    return {"suite": suite.name, "suite_file": str(suite.path), "started": started,
            "seconds": time.perf_counter() - t0, "refrender_version": __version__,
            "kernel_sha256": kernel_sha256(), "label": label,
            "counts": dict(counts, total=len(records)), "cases": records}
