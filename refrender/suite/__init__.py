"""Regression suites: many cases, each a frame of the renderer under test gated
against a cached refrender reference of the same scene.

>>> from refrender.suite import load_suite, run_suite       # doctest: +SKIP
>>> suite = load_suite("suites/demo/suite.json")            # doctest: +SKIP
>>> run = run_suite(suite, suite.cases, report_dir="report")  # doctest: +SKIP
>>> run["counts"]                                            # doctest: +SKIP

Modules: :mod:`.spec` (suite file, its JSON Schema ``schema.json``),
:mod:`.cache` (reference cache), :mod:`.runner` (cases), :mod:`.outputs`
(JSON, JUnit XML, history, HTML page).  The command line is
``refrender suite`` (:mod:`refrender.cli.suite`).
"""
from .cache import ReferenceCache, content_key, reference_settings
from .runner import run_case, run_suite
from .spec import Case, Suite, SuiteError, load_suite, schema, select

__all__ = ["ReferenceCache", "content_key", "reference_settings", "run_case", "run_suite", "Case", "Suite",
           "SuiteError", "load_suite", "schema", "select"]
