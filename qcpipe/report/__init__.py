"""The run report: figures (plots), static HTML pages (html) and Prefect artifacts (artifacts).

Reads the archive (datasets through ``archive.ncio``, the catalog, derived
products) and a plain ``run`` dict; never changes the archive except for its
own ``reports/`` folder.
"""

from .artifacts import publish_artifacts, summary_markdown
from .html import (
    diff_rows,
    report_stations,
    run_diff,
    run_from_catalog,
    run_from_summary,
    write_run_report,
    write_station_pages,
)

__all__ = ["diff_rows", "publish_artifacts", "run_diff", "run_from_catalog", "run_from_summary", "summary_markdown", "write_run_report",
           "report_stations", "write_station_pages"]
