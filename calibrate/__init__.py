"""calibrate: audit and calibrate human raters (judgment analysis, policy capturing).

The names a notebook user needs, in the order of the work::

    import calibrate
    table = calibrate.load_study("study.toml")   # validated JudgmentTable
    result = calibrate.audit(table)              # AuditResult (writes nothing)
    calibrate.write_audit(result, "reports/mine", overwrite=True)
    comparison = calibrate.compare(table)        # phases of a study: did the training work?
    calibrate.write_comparison(comparison, "reports/training", overwrite=True)

``load_study`` also takes a spec as a dict and the tables as DataFrames
(``load_study(spec, data=df, cases=cases_df)``); ``result.table("policies")`` gives one
tidy table, ``result.tables`` all of them. They load on first use, so ``import calibrate`` (and ``calibrate --help``) stays quick.
"""

from __future__ import annotations

from importlib import import_module

__version__ = "0.1.0"

#: Public name -> the module that defines it.
_PUBLIC = {
    "load_study": "calibrate.data.ingest",
    "read_spec": "calibrate.data.spec",
    "audit": "calibrate.analyses",
    "AuditResult": "calibrate.analyses",
    "write_audit": "calibrate.writing",
    "compare": "calibrate.training.phases",
    "ComparisonResult": "calibrate.training.phases",
    "write_comparison": "calibrate.writing",
    "CalibrateError": "calibrate.errors",
}

__all__ = ["AuditResult", "CalibrateError", "ComparisonResult", "__version__", "audit", "compare",
           "load_study", "read_spec", "write_audit", "write_comparison"]


def __getattr__(name: str):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'calibrate' has no attribute {name!r}")
    value = getattr(import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
