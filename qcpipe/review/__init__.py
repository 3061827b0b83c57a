"""Review by eye: a local web page to look at a deployment's flags, mark periods and re-run QC.

data     what the page shows, read from the archive (catalog, datasets through ncio); thinning for display
rerun    the page's re-run: pipeline.run.rerun on the in-process runner, one at a time, in a thread
app      the Starlette application: pages, JSON API, session token, host and origin checks
"""

from .app import create_app, serve

__all__ = ["create_app", "serve"]
