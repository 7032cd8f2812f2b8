"""The HTML report: the whole pipeline on one dataset folder, written as one
self-contained HTML file with its figures, tables and a provenance appendix.

:func:`build_report` runs check -> harmonise -> audit -> per-taxon -> derive ->
the fits declared in ``comparo.toml`` (``[[analysis]]``) or a default set, and
writes, under the output folder::

    report.html        self-contained (figures as base64 PNG, inline sorting script)
    figures/*.png|svg  every figure, byte-identical across runs
    tables/*.csv       per_taxon, derived, fits, flags, diagnostics, points, audit, sources,
                       problems
    tables/fits.json   each fit's ``to_dict()`` (the ``comparo fit --format json`` object; a PGLS
                       fit here also carries the flags of its whitened residuals)
    tables/sensitivity_*.csv, sensitivity.json
                       leave-one-source-out, basis filters, jackknife and measurement-error
                       parts of each fit (:func:`comparo.fitting.source_sensitivity.sensitivity`)
    run.json           input SHA-256 hashes, settings, package versions, seed

Every number in the HTML is read from the same result objects that are written
to ``tables/``. The report is a research aid; it does not replace reading the sources.

Layout: :mod:`~comparo.report.build` (the pipeline and files), :mod:`~comparo.report.per_fit`
(per-fit points, flags, titles, tree and lambda figures, sensitivity),
:mod:`~comparo.report.page`, :mod:`~comparo.report.render`, :mod:`~comparo.report.appendix`
(the HTML, from the Jinja2 templates in ``templates/``), :mod:`~comparo.report.fmt`
(how numbers read) and :mod:`~comparo.report.result` (:class:`ReportResult`).
"""

from __future__ import annotations

from comparo.report.build import analyses, build_report, input_hashes, package_versions
from comparo.report.per_fit import fit_points, sensitivity_frame, sensitivity_summary_row
from comparo.report.result import (
    DEFAULT_ANALYSES,
    DISCLAIMER,
    LAMBDA_GRID,
    SENSITIVITY_DRAWS,
    ReportResult,
)

__all__ = [
    "build_report",
    "ReportResult",
    "DEFAULT_ANALYSES",
    "SENSITIVITY_DRAWS",
    "LAMBDA_GRID",
    "DISCLAIMER",
    "fit_points",
    "sensitivity_frame",
    "sensitivity_summary_row",
    "input_hashes",
    "package_versions",
    "analyses",
]
