"""Reports for a methods section: results table, figures, methods paragraph.

``study``     what a report shows (a scenario study or a sweep store), and running a study
``text``      the words: labels, number formatting, model descriptions, methods paragraph
``figures``   matplotlib figures (coverage, margin, misses, sweep small multiples)
``document``  report.md, report.html, results.csv, summary.json and the figure files
"""

from simcheck.report.document import (
    ReportFiles,
    check_out_dir,
    check_out_dir_usable,
    report,
    study_figures,
    sweep_figures,
    write_report,
)
from simcheck.report.study import (
    StudyResults,
    SweepResults,
    curve_grid,
    formula_for,
    is_store,
    read_sweep,
    run_study,
    versions,
)
from simcheck.report.text import describe_model, method_text, methods_paragraph

__all__ = ["StudyResults", "SweepResults", "ReportFiles", "run_study", "read_sweep", "write_report", "report",
           "methods_paragraph", "describe_model", "method_text", "curve_grid", "formula_for", "is_store",
           "check_out_dir", "check_out_dir_usable", "versions", "study_figures", "sweep_figures"]
