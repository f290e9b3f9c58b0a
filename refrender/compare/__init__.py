"""Comparing a test frame with a reference: metrics, significance, diagnosis, reports.

>>> from refrender.compare import load_frame, compare
>>> rep = compare(load_frame("ref.exr"), load_frame("frame.exr"))   # doctest: +SKIP
>>> rep["verdict"], rep["metrics"]["relmse"]["Y"], rep["diagnoses"]  # doctest: +SKIP

Modules: :mod:`.metrics` (plain metric functions, reused by the convergence
studies), :mod:`.significance`, :mod:`.diagnose`, :mod:`.inputs`,
:mod:`.report`, :mod:`.core`, :mod:`.cli` (``python tools/diff.py``).
"""
from .core import compare, failed_conditions
from .diagnose import diagnose
from .inputs import CompareError, Frame, load_frame
from .metrics import all_metrics
from .significance import analyse

__all__ = ["compare", "failed_conditions", "diagnose", "CompareError", "Frame", "load_frame",
           "all_metrics", "analyse"]
