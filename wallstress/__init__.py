"""wallstress: LV mass, geometry, end-systolic wall stress and chamber function from study lists.

Public API::

    analyse(df, options=None) -> DataFrame      every row in, every row out, measures and flags added
    analyse_with_findings(df, ...) -> Analysis   the same, with the findings and the methods record
    track(results, ...) -> Tracking              per-patient change, slopes, geometry transitions
    read_studies(path, ...) -> StudyTable        a study list from csv / xlsx / ods / parquet
    write_results(...)                           results, findings and methods next to the user's data
    calibrate(analysed_normals, ...) -> Calibration  a lab's own reference set from its healthy subjects
    Options                                      how a run is done (reference set, formulas, units)

wallstress supports, and never replaces, a qualified clinician's judgement and the local lab's
protocols and reference values.
"""

from __future__ import annotations

from importlib import import_module

__version__ = "0.1.0"

_LAZY = {
    "analyse": ("wallstress.analysis.pipeline", "analyse"),
    "analyse_with_findings": ("wallstress.analysis.pipeline", "analyse_with_findings"),
    "Options": ("wallstress.options", "Options"),
    "track": ("wallstress.tracking.track", "track"),
    "read_studies": ("wallstress.read.studies", "read_studies"),
    "write_results": ("wallstress.write.results", "write_results"),
    "calibrate": ("wallstress.calibration.fit", "calibrate"),
}

__all__ = [*_LAZY, "__version__"]


def __getattr__(name: str):
    if name in _LAZY:
        module, attr = _LAZY[name]
        return getattr(import_module(module), attr)
    raise AttributeError(f"module 'wallstress' has no attribute {name!r}")
