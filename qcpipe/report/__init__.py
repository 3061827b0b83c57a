"""The run report: figures (plots), static HTML pages (html) and Prefect artifacts (artifacts).

Reads the archive (datasets through ``archive.ncio``, the catalog, derived
products) and a plain ``run`` dict; never changes the archive except for its
own ``reports/`` folder.  Names are imported from their modules on first use
(:mod:`qcpipe.lazy`): the run model (``report.model``) does not load the plotting libraries.
"""

from ..lazy import exports

_WHERE = {"publish_artifacts": ".artifacts", "summary_markdown": ".artifacts",
          **{n: ".html" for n in ("diff_rows", "report_stations", "run_diff", "run_from_catalog", "run_from_summary",
                                  "write_run_report", "write_station_pages")}}
__all__ = sorted(_WHERE)
__getattr__, __dir__ = exports(__name__, _WHERE)
