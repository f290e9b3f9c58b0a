"""``refrender suite SUITE.json``: run a regression suite against cached references.

Exit status: 0 = every case passes its gates, 1 = a case fails or could not
be compared, 2 = the suite file or an option is invalid (one line on stderr),
130/143 = interrupted (the reference being rendered keeps its checkpoint).
"""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import RenderError


def add_parser(sub) -> None:
    p = sub.add_parser("suite", help="run a regression suite: frames of a renderer under test against "
                       "cached refrender references (exit status 1 if any case fails)",
                       description="Run the cases of SUITE.json: each compares a frame (a file, or the "
                       "output of a command) with a refrender reference of the same scene, rendered once "
                       "and cached under a key of the scene content, the reference settings and the kernel "
                       "code, and fails when one of its fail_if gates holds.  Exit status 0: all pass; "
                       "1: some fail; 2: bad suite or option.")
    p.add_argument("suite", help="suite file (JSON; schema: refrender/suite/schema.json)")
    p.add_argument("--only", action="append", default=[], metavar="PATTERN",
                   help="run only cases whose name or a tag matches the glob PATTERN (repeatable)")
    p.add_argument("--update-references", action="store_true",
                   help="re-render the references of the selected cases even when cached")
    p.add_argument("--keep-references", action="store_true",
                   help="use a cached reference made by other kernel code instead of re-rendering it "
                   "(reported as 'other_kernel')")
    p.add_argument("--cache", metavar="DIR", help="reference cache folder (default: the suite's 'cache', "
                   "else .refrender-references beside the suite file)")
    farm = p.add_mutually_exclusive_group()
    farm.add_argument("--cluster", metavar="ADDRESS", help="render references on an existing Dask scheduler")
    farm.add_argument("--local-workers", type=int, metavar="N",
                      help="render references on a local Dask cluster of N worker processes")
    p.add_argument("--report", metavar="DIR", help="write the HTML report (index.html, one comparison "
                   "report per case) and append to DIR/history.jsonl")
    p.add_argument("--history", metavar="FILE", help="history file (default: DIR/history.jsonl of --report)")
    p.add_argument("--junit", metavar="FILE", help="write a JUnit XML file (one test case per suite case)")
    p.add_argument("--json", metavar="FILE", help="write the results as JSON")
    p.add_argument("--label", help="label of this run in the history, e.g. the commit of the renderer under test")
    p.add_argument("--quiet", action="store_true", help="print only the summary line and failures")
    p.set_defaults(run=run)


def _check_file_arg(value, what):
    if value is None:
        return None
    path = Path(value)
    folder = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise RenderError(f"{what}: {value!r} is a folder")
    if not folder.is_dir():
        raise RenderError(f"{what}: folder {str(folder)!r} does not exist")
    return path


def run(args) -> int:
    from ..suite import load_suite, run_suite, select
    from ..suite.cache import Interrupted
    from ..suite.outputs import append_history, read_history, write_html, write_json, write_junit
    from ..overnight import EXIT_STATUS
    junit = _check_file_arg(args.junit, "--junit")
    json_out = _check_file_arg(args.json, "--json")
    history = _check_file_arg(args.history, "--history")
    report = Path(args.report) if args.report else None
    if report is not None and report.exists() and not report.is_dir():
        raise RenderError(f"--report: {args.report!r} is not a folder")
    if report is not None:
        try:
            import matplotlib  # noqa: F401  (the per-case comparison reports draw colour scales)
        except ImportError:
            raise RenderError("--report: needs matplotlib (pip install 'refrender[plots]')") from None
    if args.local_workers is not None and args.local_workers < 1:
        raise RenderError(f"--local-workers: must be >= 1, got {args.local_workers}")
    use_farm = bool(args.cluster) or args.local_workers is not None
    suite = load_suite(args.suite, farm=use_farm)
    cases = select(suite.cases, args.only)
    if not cases:
        raise RenderError(f"--only: no case matches {', '.join(args.only)} "
                          f"(cases: {', '.join(c.name for c in suite.cases)})")
    if report is not None:
        report.mkdir(parents=True, exist_ok=True)
        history = history or report / "history.jsonl"
    log = None if args.quiet else (lambda msg: print(f"suite: {msg}", file=sys.stderr))
    client = cluster = None
    if use_farm:
        try:
            import distributed
        except ImportError:
            raise RenderError("--cluster/--local-workers: Dask distributed is not installed "
                              "(pip install 'refrender[farm]')") from None
        from .. import farm
        if args.local_workers is not None:
            cluster = farm.local_cluster(args.local_workers)
            client = distributed.Client(cluster)
        else:
            client = farm.connect(args.cluster)
    try:
        result = run_suite(suite, cases, cache_dir=args.cache, report_dir=report,
                           update=args.update_references, keep_other_kernels=args.keep_references,
                           client=client, log=log, label=args.label)
    except Interrupted as exc:
        print(f"refrender: {exc}", file=sys.stderr)
        return EXIT_STATUS.get(exc.reason, 130)
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    runs = append_history(history, result) if history is not None else []
    if json_out is not None:
        write_json(json_out, result)
    if junit is not None:
        write_junit(junit, result)
    page = write_html(report / "index.html", result, runs) if report is not None else None
    c = result["counts"]
    for rec in result["cases"]:
        if rec["status"] != "pass":
            print(f"suite: {rec['status'].upper()} {rec['name']}: {rec['message'] or rec['verdict']}",
                  file=sys.stderr)
        elif not args.quiet:
            print(f"suite: pass {rec['name']}", file=sys.stderr)
    print(f"{suite.name}: {c['pass']} passed, {c['fail']} failed, {c['error']} errors "
          f"({result['seconds']:.1f} s)" + (f"; report {page}" if page else ""))
    return 0 if c["pass"] == c["total"] else 1
