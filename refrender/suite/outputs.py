"""Outputs of a suite run: JSON, JUnit XML, the history file and the HTML page.

JUnit XML follows the de-facto schema CI servers read (the ``testsuites`` /
``testsuite`` / ``testcase`` elements with ``failure`` and ``error``
children, as written by the Ant JUnit task and read by Jenkins, GitLab,
GitHub and others): one ``testcase`` per suite case, ``failure`` for a case
whose gates hold (message: the gates and the verdict; text: the diagnosis),
``error`` for a case that could not be compared.
"""
from __future__ import annotations

import base64
import html
import io
import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path

from ..compare.report import write_json as _write_json
from ..io import atomic_write

#: runs kept in the history file
HISTORY_RUNS = 500
#: runs shown in a case's trend plot
TREND_RUNS = 20
#: the quantity drawn in the trend plot
TREND_METRIC = "relmse"


def write_json(path, run: dict) -> None:
    _write_json(path, run)


# ----------------------------------------------------------------------------- JUnit XML

def junit_tree(run: dict) -> ET.ElementTree:
    c = run["counts"]
    root = ET.Element("testsuites", name=f"refrender suite {run['suite']}", tests=str(c["total"]),
                      failures=str(c["fail"]), errors=str(c["error"]), skipped="0",
                      time=f"{run['seconds']:.3f}")
    ts = ET.SubElement(root, "testsuite", name=run["suite"], tests=str(c["total"]), failures=str(c["fail"]),
                       errors=str(c["error"]), skipped="0", time=f"{run['seconds']:.3f}",
                       timestamp=run["started"][:19])
    props = ET.SubElement(ts, "properties")
    for k in ("suite_file", "refrender_version", "kernel_sha256", "label"):
        if run.get(k):
            ET.SubElement(props, "property", name=k, value=str(run[k]))
    for rec in run["cases"]:
        tc = ET.SubElement(ts, "testcase", name=rec["name"], classname=f"refrender.suite.{run['suite']}",
                           time=f"{rec.get('seconds', 0.0):.3f}")
        if rec["status"] == "fail":
            msg = "; ".join(rec["failed"]) + f" -- {rec['verdict']}"
            el = ET.SubElement(tc, "failure", message=msg, type="gate")
            el.text = _diagnosis_text(rec)
        elif rec["status"] == "error":
            ET.SubElement(tc, "error", message=rec["message"], type="no comparison").text = rec["message"]
        out = ET.SubElement(tc, "system-out")
        out.text = _case_text(rec)
    ET.indent(root)
    return ET.ElementTree(root)


def _diagnosis_text(rec: dict) -> str:
    if not rec["diagnoses"]:
        return f"verdict: {rec['verdict']}\ndiagnosis: no classic fault detected"
    lines = [f"verdict: {rec['verdict']}", "diagnosis:"]
    lines += [f"  {d['fault']} (confidence {d['confidence']:.2f}): {d['detail']}" for d in rec["diagnoses"]]
    return "\n".join(lines)


def _case_text(rec: dict) -> str:
    lines = [f"scene {rec['scene']}", f"frame {rec.get('frame')}",
             f"reference {rec['reference']['path']} ({rec['reference']['spp']} spp, cache {rec['reference']['cache']})"]
    for k, v in rec["metrics"].items():
        if v is not None:
            lines.append(f"{k} {v:.6g}" if isinstance(v, float) else f"{k} {v}")
    if rec.get("report"):
        lines.append(f"report {rec['report']}")
    return "\n".join(lines)


def write_junit(path, run: dict) -> None:
    buf = io.BytesIO()
    junit_tree(run).write(buf, encoding="utf-8", xml_declaration=True)
    with atomic_write(path, "wb") as fh:
        fh.write(buf.getvalue() + b"\n")


# ----------------------------------------------------------------------------- history

def history_entry(run: dict) -> dict:
    return {"started": run["started"], "label": run.get("label"), "kernel_sha256": run["kernel_sha256"],
            "cases": {r["name"]: dict({"status": r["status"]}, **r["metrics"]) for r in run["cases"]}}


def read_history(path) -> list:
    """The runs of a history file (one JSON object per line); unreadable lines are skipped."""
    path = Path(path)
    if not path.is_file():
        return []
    runs = []
    for line in path.read_text("utf-8").splitlines():
        try:
            obj = json.loads(line)
        except ValueError:
            continue
        if isinstance(obj, dict) and isinstance(obj.get("cases"), dict):
            runs.append(obj)
    return runs


def append_history(path, run: dict) -> list:
    """Add this run to the history file (rewritten atomically); returns all runs, oldest first."""
    runs = read_history(path) + [history_entry(run)]
    runs = runs[-HISTORY_RUNS:]
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    with atomic_write(path, "w") as fh:
        for r in runs:
            fh.write(json.dumps(r, sort_keys=True, separators=(",", ":")) + "\n")
    return runs


def trend_svg(runs: list, case: str, metric: str = TREND_METRIC, n: int = TREND_RUNS) -> str:
    """A small inline SVG of ``metric`` of ``case`` over the last ``n`` runs (dots coloured by status)."""
    pts = []
    for r in runs[-n:]:
        c = r["cases"].get(case)
        if c is None:
            continue
        v = c.get(metric)
        pts.append((v if isinstance(v, (int, float)) and math.isfinite(v) else None, c.get("status"),
                    r.get("label") or r.get("started", "")))
    vals = [v for v, _, _ in pts if v is not None]
    w, h, pad = 120, 32, 4
    if not vals:
        return f'<svg class="trend" width="{w}" height="{h}"><title>no history</title></svg>'
    lo, hi = min(vals), max(vals)
    span = hi - lo if hi > lo else (abs(hi) or 1.0)
    step = (w - 2 * pad) / max(1, len(pts) - 1)
    coords = []
    for i, (v, st, lab) in enumerate(pts):
        x = pad + step * i if len(pts) > 1 else w / 2
        y = None if v is None else h - pad - (v - lo) / span * (h - 2 * pad) if hi > lo else h / 2
        coords.append((x, y, v, st, lab))
    line = " ".join(f"{x:.1f},{y:.1f}" for x, y, *_ in coords if y is not None)
    dots = "".join(
        f'<circle cx="{x:.1f}" cy="{y:.1f}" r="2.6" class="dot-{html.escape(str(st))}">'
        f'<title>{html.escape(str(lab))}: {metric} {v:.4g} ({html.escape(str(st))})</title></circle>'
        for x, y, v, st, lab in coords if y is not None)
    title = f"{metric} over the last {len(pts)} run(s): min {lo:.3g}, max {hi:.3g}, now {vals[-1]:.3g}"
    return (f'<svg class="trend" width="{w}" height="{h}" viewBox="0 0 {w} {h}" role="img">'
            f'<title>{html.escape(title)}</title>'
            f'<polyline points="{line}" fill="none" stroke="#667" stroke-width="1"/>{dots}</svg>')


# ----------------------------------------------------------------------------- HTML

def _thumb(png_path: Path, width: int = 128) -> str:
    """A small embedded copy of one of the case report's pictures (nearest-neighbour subsampling)."""
    if not png_path.is_file():
        return ""
    import imageio.v3 as iio
    img = iio.imread(png_path)
    step = max(1, math.ceil(img.shape[1] / width))
    small = img[::step, ::step]
    buf = io.BytesIO()
    iio.imwrite(buf, small, extension=".png")
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img class="thumb" alt="{html.escape(png_path.stem)}" src="data:image/png;base64,{data}">'


_COLUMNS = [  # (key, header, numeric)
    ("status", "result", False), ("name", "case", False), ("tags", "tags", False),
    (None, "reference", False), (None, "frame", False), (None, "relative error", False),
    ("relmse", "relMSE", True), ("psnr", "PSNR", True), ("ssim", "SSIM", True),
    ("bias_t", "bias (σ)", True), ("relative_bias", "rel. bias", True),
    ("verdict", "verdict and diagnosis", False), (None, f"trend ({TREND_METRIC})", False),
    ("cache", "reference cache", False),
]


def _fmt(v, digits="{:.4g}"):
    if v is None:
        return "–"
    if isinstance(v, str):
        return v
    return digits.format(v)


def _row(rec: dict, report_dir: Path, runs: list) -> str:
    m = rec["metrics"]
    st = rec["status"]
    name = html.escape(rec["name"])
    link = f'<a class="case" href="{html.escape(rec["report"])}">{name}</a>' if rec.get("report") else name
    folder = report_dir / "cases" / rec["name"]
    pics = [_thumb(folder / f"{p}.png") if rec.get("report") else "" for p in ("reference", "test", "relative_error")]
    if st == "error":
        verdict = f'<span class="msg">{html.escape(rec["message"])}</span>'
    else:
        verdict = "verdict: " + html.escape(rec["verdict"] or "")
        if rec["failed"]:
            verdict = "<b>gate: " + html.escape("; ".join(rec["failed"])) + "</b><br>" + verdict
        if rec["diagnoses"]:
            verdict += "<ul>" + "".join(f"<li>{html.escape(d['fault'])} ({d['confidence']:.2f}): "
                                        f"{html.escape(d['detail'])}</li>" for d in rec["diagnoses"]) + "</ul>"
    rb = m.get("relative_bias")
    cells = [
        (st, f'<span class="badge {st}">{st}</span>'), (rec["name"], link),
        (" ".join(rec["tags"]), html.escape(" ".join(rec["tags"]))),
        (None, pics[0]), (None, pics[1]), (None, pics[2]),
        (m.get("relmse"), _fmt(m.get("relmse"))), (m.get("psnr"), _fmt(m.get("psnr"), "{:.2f}")),
        (m.get("ssim"), _fmt(m.get("ssim"), "{:.4f}")), (m.get("bias_t"), _fmt(m.get("bias_t"), "{:+.1f}")),
        (rb, "–" if rb is None else f"{100 * rb:+.2f}%"),
        (rec["verdict"] or rec["message"], verdict), (None, trend_svg(runs, rec["name"])),
        (rec["reference"]["cache"], html.escape(f"{rec['reference']['cache']}, {rec['reference']['spp']} spp")),
    ]
    tds = []
    for (key, _, numeric), (v, content) in zip(_COLUMNS, cells):
        if key is None:
            tds.append(f"<td>{content}</td>")
            continue
        if numeric:
            sv = "" if not isinstance(v, (int, float)) else repr(float(v))
        else:
            sv = html.escape(str(v or ""))
        tds.append(f'<td data-v="{sv}">{content}</td>')
    return f'<tr class="row {st}" data-case="{name}">' + "".join(tds) + "</tr>"


def write_html(path, run: dict, runs: list) -> Path:
    """The self-contained summary page (pictures embedded; rows link to the case reports)."""
    path = Path(path)
    report_dir = path.parent
    heads = "".join(
        (f'<th data-key="{k}" data-num="{int(num)}" tabindex="0">{html.escape(h)}</th>' if k else f"<th>{html.escape(h)}</th>")
        for k, h, num in _COLUMNS)
    rows = "\n".join(_row(r, report_dir, runs) for r in run["cases"])
    c = run["counts"]
    label = f", {html.escape(run['label'])}" if run.get("label") else ""
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>refrender suite {html.escape(run['suite'])}</title>
<style>
body {{ font-family: sans-serif; margin: 1.2em; color: #222; }}
table {{ border-collapse: collapse; font-size: 0.85em; }}
th, td {{ padding: 0.25em 0.5em; border-bottom: 1px solid #ddd; vertical-align: top; text-align: left; }}
th[data-key] {{ cursor: pointer; user-select: none; white-space: nowrap; }}
th.asc::after {{ content: " \\25B2"; }} th.desc::after {{ content: " \\25BC"; }}
td[data-v] {{ max-width: 28em; }} td.verdict {{ width: 30em; min-width: 30em; }} td ul {{ margin: 0.2em 0 0 1em; padding: 0; }}
img.thumb {{ width: 96px; image-rendering: pixelated; display: block; }}
.badge {{ padding: 0.1em 0.5em; border-radius: 0.6em; color: #fff; font-weight: bold; }}
.badge.pass {{ background: #2f7d5b; }} .badge.fail {{ background: #b3402a; }} .badge.error {{ background: #6c4f99; }}
circle.dot-pass {{ fill: #2f7d5b; }} circle.dot-fail {{ fill: #b3402a; }} circle.dot-error {{ fill: #6c4f99; }}
#controls {{ margin: 0.8em 0; }} #controls input {{ width: 18em; }}
.summary span {{ margin-right: 1.2em; }}
</style></head><body>
<h1>Regression suite <code>{html.escape(run['suite'])}</code></h1>
<p class="summary"><span id="counts">{c['pass']} passed, {c['fail']} failed, {c['error']} errors of {c['total']}</span>
<span>{html.escape(run['started'])}{label}</span><span>{run['seconds']:.1f} s</span>
<span>refrender {html.escape(run['refrender_version'])}, kernels {html.escape(run['kernel_sha256'])}</span></p>
<div id="controls"><label>filter <input id="filter" type="search" placeholder="name, tag, verdict, fault"></label>
<label>result <select id="status"><option value="">all</option><option>pass</option><option>fail</option>
<option>error</option></select></label> <span id="shown"></span></div>
<table id="cases"><thead><tr>{heads}</tr></thead><tbody>
{rows}
</tbody></table>
<p>Metrics are of luminance over the compared pixels; bias (σ) is the pooled mean difference in standard
errors of the reference's noise; a case's name opens its full comparison report. Click a header to sort;
the page state is kept in the address (#sort=KEY&amp;dir=asc|desc&amp;q=TEXT&amp;status=fail).</p>
<script>
(function () {{
  const tbody = document.querySelector('#cases tbody');
  const heads = Array.from(document.querySelectorAll('#cases th'));
  const filter = document.getElementById('filter'), status = document.getElementById('status');
  let sortKey = null, sortDir = 'asc';
  function col(key) {{ return heads.findIndex(h => h.dataset.key === key); }}
  function apply() {{
    const rows = Array.from(tbody.rows);
    if (sortKey !== null && col(sortKey) >= 0) {{
      const i = col(sortKey), num = heads[i].dataset.num === '1', sign = sortDir === 'desc' ? -1 : 1;
      rows.sort((a, b) => {{
        const x = a.cells[i].dataset.v, y = b.cells[i].dataset.v;
        if (num) {{
          const fx = x === '' ? NaN : parseFloat(x), fy = y === '' ? NaN : parseFloat(y);
          if (isNaN(fx) || isNaN(fy)) return isNaN(fx) - isNaN(fy);
          return sign * (fx - fy);
        }}
        return sign * x.localeCompare(y);
      }});
      rows.forEach(r => tbody.appendChild(r));
      heads.forEach((h, j) => h.className = j === i ? sortDir : '');
    }}
    const q = filter.value.trim().toLowerCase(), s = status.value;
    let shown = 0;
    rows.forEach(r => {{
      const ok = (!q || r.textContent.toLowerCase().includes(q)) && (!s || r.classList.contains(s));
      r.hidden = !ok; shown += ok;
    }});
    document.getElementById('shown').textContent = shown + ' of ' + rows.length + ' shown';
    const p = new URLSearchParams();
    if (sortKey) {{ p.set('sort', sortKey); p.set('dir', sortDir); }}
    if (q) p.set('q', q);
    if (s) p.set('status', s);
    history.replaceState(null, '', p.toString() ? '#' + p.toString() : location.pathname);
  }}
  heads.forEach(h => {{
    if (!h.dataset.key) return;
    const go = () => {{
      sortDir = sortKey === h.dataset.key && sortDir === 'asc' ? 'desc' : 'asc';
      sortKey = h.dataset.key; apply();
    }};
    h.addEventListener('click', go);
    h.addEventListener('keydown', e => {{ if (e.key === 'Enter') go(); }});
  }});
  filter.addEventListener('input', apply);
  status.addEventListener('change', apply);
  const init = new URLSearchParams(location.hash.slice(1));
  if (init.get('sort')) {{ sortKey = init.get('sort'); sortDir = init.get('dir') === 'desc' ? 'desc' : 'asc'; }}
  if (init.get('q')) filter.value = init.get('q');
  if (init.get('status')) status.value = init.get('status');
  apply();
}})();
</script>
</body></html>
"""
    with atomic_write(path, "w") as fh:
        fh.write(page)
    return path
