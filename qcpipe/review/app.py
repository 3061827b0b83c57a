"""The review page's web application (Starlette): pages, the JSON API, and what keeps it safe.

Safe by default:

- served on loopback unless told otherwise; requests whose ``Host`` is not one of the
  served names are refused (a page of another site cannot reach it by renaming itself);
- every state-changing request (POST, PUT, DELETE) carries the session's token (made at
  start, written in the page, sent back in the ``X-Qcpipe-Token`` header), a JSON body of
  at most :data:`MAX_BODY` bytes, and no foreign ``Origin``: a form or script of another
  site cannot write;
- files: only the catalog's datasets inside the archive are read, only the workspace's
  annotations file is written (through :mod:`qcpipe.config.annotations_edit`), and the
  archive only by the re-run; every value shown is escaped (templates autoescape, the
  script writes text, never HTML).
"""

from __future__ import annotations

import datetime as dt
import hmac
import json
import secrets
from importlib import resources
from pathlib import Path

import jinja2
from starlette.applications import Starlette
from starlette.middleware import Middleware
from starlette.middleware.trustedhost import TrustedHostMiddleware
from starlette.requests import Request
from starlette.responses import FileResponse, HTMLResponse, JSONResponse, Response
from starlette.routing import Route

from ..config.annotations import Annotation
from ..config.annotations_edit import annotation_key, edit_annotations
from ..config.loading import SAFE_ID
from ..errors import QcpipeError
from ..pipeline import load_context
from .data import ArchiveView, NotFound, annotation_rows, flag_classes, parse_time
from .rerun import Busy, RerunWorker

MAX_BODY = 16 * 1024
MAX_REASON = 500
MAX_REVIEWER = 80
#: the longest period one annotation may cover
MAX_SPAN_DAYS = 400
TOKEN_HEADER = "x-qcpipe-token"
HERE = Path(__file__).parent
_TEMPLATES = jinja2.Environment(loader=jinja2.FileSystemLoader(HERE / "templates"),
                                autoescape=jinja2.select_autoescape(["html", "j2"], default_for_string=True),
                                undefined=jinja2.StrictUndefined)
SECURITY_HEADERS = {
    "Content-Security-Policy": "default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
                               "img-src 'self' data:; connect-src 'self'; frame-ancestors 'none'; "
                               "form-action 'self'; base-uri 'none'",
    "X-Content-Type-Options": "nosniff", "X-Frame-Options": "DENY", "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
}


def plotly_js() -> Path:
    """plotly.js as the installed ``plotly`` package ships it (served by the app: no network needed)."""
    return Path(str(resources.files("plotly") / "package_data" / "plotly.min.js"))


#: the only files served under /static/, by name
STATIC = {"review.js": (HERE / "static" / "review.js", "text/javascript"),
          "review.css": (HERE / "static" / "review.css", "text/css"),
          "plotly.min.js": (None, "text/javascript")}


class Refused(Exception):
    """A request refused with an HTTP status and one sentence."""

    def __init__(self, status: int, text: str):
        super().__init__(text)
        self.status, self.text = status, text


def _error(status: int, text: str) -> JSONResponse:
    return JSONResponse({"error": text}, status_code=status, headers=SECURITY_HEADERS)


def _ok(data, status: int = 200) -> JSONResponse:
    return JSONResponse(data, status_code=status, headers=SECURITY_HEADERS)


def _id(value: str, what: str) -> str:
    if not isinstance(value, str) or not SAFE_ID.fullmatch(value) or ".." in value:
        raise Refused(404, f"no {what} {str(value)[:64]!r} in this archive")
    return value


def _text(body: dict, key: str, lo: int, hi: int) -> str:
    value = body.get(key)
    if not isinstance(value, str):
        raise Refused(400, f"{key}: give it as text")
    value = value.strip()
    if not lo <= len(value) <= hi:
        raise Refused(400, f"{key}: give {lo} to {hi} characters (got {len(value)})")
    if any(not c.isprintable() for c in value):
        raise Refused(400, f"{key}: control characters (line breaks, tabs) are not allowed; write it on one line")
    return value


class ReviewApp:
    """The state of one served workspace: its context, the archive view, the token, the re-run worker."""

    def __init__(self, workspace: str | Path, *, token: str | None = None, hosts: list[str] | None = None):
        self.workspace = Path(workspace).resolve()
        self.ctx = load_context(self.workspace)
        self.view = ArchiveView(self.ctx)
        self.token = token or secrets.token_urlsafe(32)
        self.hosts = hosts or ["127.0.0.1", "localhost", "[::1]"]
        self.worker = RerunWorker(self.workspace, ArchiveView)

    # --- guards ----------------------------------------------------------------------
    def check_write(self, request: Request) -> None:
        given = request.headers.get(TOKEN_HEADER, "")
        if not given or not hmac.compare_digest(given.encode(), self.token.encode()):
            raise Refused(403, "this request carries no valid session token; reload the review page and try again")
        origin = request.headers.get("origin")
        if origin is not None and origin != f"{request.url.scheme}://{request.headers.get('host', '')}":
            raise Refused(403, f"requests from another site ({origin[:80]}) may not change anything here")
        if request.headers.get("sec-fetch-site") not in (None, "same-origin", "none"):
            raise Refused(403, "requests from another site may not change anything here")

    async def json_body(self, request: Request) -> dict:
        if request.headers.get("content-type", "").split(";")[0].strip() != "application/json":
            raise Refused(415, "send the request body as JSON (Content-Type: application/json)")
        size = int(request.headers.get("content-length", "0") or 0)
        if size > MAX_BODY:
            raise Refused(413, f"the request body is {size} bytes; at most {MAX_BODY} are accepted")
        raw = await request.body()
        if len(raw) > MAX_BODY:
            raise Refused(413, f"the request body is {len(raw)} bytes; at most {MAX_BODY} are accepted")
        try:
            body = json.loads(raw)
        except (ValueError, UnicodeDecodeError):
            raise Refused(400, "the request body is not JSON") from None
        if not isinstance(body, dict):
            raise Refused(400, "the request body must be a JSON object")
        return body

    def annotations_path(self) -> Path:
        ws_path = self.ctx.annotations.path
        if ws_path is None:
            raise Refused(409, f"the workspace {self.workspace.name} names no annotations file: add "
                               "annotations = \"annotations.toml\" under [paths] in it and start the page again")
        if self.worker.running():
            raise Refused(409, "a re-run is going on; save annotations when it has finished")
        return ws_path

    def annotation_from(self, body: dict) -> Annotation:
        """An annotation from the page's form, checked against the register and the archive."""
        station = _id(body.get("station", ""), "station")
        known = self.view.stations()
        stations = {s["id"]: s for s in known["stations"]}
        if station not in stations or not stations[station]["deployments"]:
            raise Refused(404, f"no station {station!r} with datasets in this archive")
        variables = body.get("variables")
        if not isinstance(variables, list) or not variables or not all(isinstance(v, str) for v in variables):
            raise Refused(400, "variables: give a list of variable names, or [\"all\"]")
        allowed = {v for d in stations[station]["deployments"] for v in d["variables"]}
        unknown = [v for v in variables if v != "all" and v not in allowed]
        if unknown:
            raise Refused(400, f"variables: {', '.join(repr(v[:40]) for v in unknown[:3])} not recorded at "
                               f"{station}; choose from {', '.join(sorted(allowed))} or all")
        try:
            t0, t1 = parse_time(body.get("start", ""), "start"), parse_time(body.get("end", ""), "end")
        except ValueError as err:
            raise Refused(400, str(err)) from None
        if t1 < t0:
            raise Refused(400, "end is before start; swap them")
        if t1 - t0 > MAX_SPAN_DAYS * 86400 * 10**9:
            raise Refused(400, f"the period covers {(t1 - t0) / 86400e9:.0f} days; one annotation covers at most "
                               f"{MAX_SPAN_DAYS}: split it")
        flag = body.get("flag")
        if flag not in (1, 3, 4) or isinstance(flag, bool):
            raise Refused(400, "flag: give 1 (pass), 3 (suspect) or 4 (fail)")
        reason = _text(body, "reason", 3, MAX_REASON)
        reviewer = _text(body, "reviewer", 1, MAX_REVIEWER)
        utc = dt.timezone.utc
        try:
            return Annotation(station=station, variables=variables, flag=flag, reason=reason, reviewer=reviewer,
                              start=dt.datetime.fromtimestamp(t0 // 10**9, utc),
                              end=dt.datetime.fromtimestamp(t1 // 10**9, utc), date=dt.datetime.now(utc).date())
        except ValueError as err:
            raise Refused(400, str(err).splitlines()[-1]) from None

    def reload_annotations(self) -> None:
        from ..config import load_workspace

        self.ctx.annotations = load_workspace(self.workspace).load_annotations(self.ctx.register)

    def render(self, template: str, **values) -> HTMLResponse:
        html = _TEMPLATES.get_template(template).render(token=self.token, workspace=self.workspace.name,
                                                        flag_classes=flag_classes(), **values)
        return HTMLResponse(html, headers=SECURITY_HEADERS)

    # --- pages -------------------------------------------------------------------------
    async def stations_page(self, request: Request):
        if not self.view.has_catalog():
            return self.render("stations.html.j2", stations=[], notices=[],
                               empty=f"archive {self.ctx.paths.root} has no catalog yet; run 'qcpipe process' first")
        known = self.view.stations()
        return self.render("stations.html.j2", stations=known["stations"], notices=known["notices"], empty="")

    async def deployment_page(self, request: Request):
        dep = _id(request.path_params["deployment"], "deployment")
        meta = self.view.deployment(dep, self.ctx.annotations)
        return self.render("deployment.html.j2", meta=meta,
                           can_annotate=self.ctx.annotations.path is not None)

    async def static(self, request: Request):
        name = request.path_params["name"]
        if name not in STATIC:
            raise Refused(404, f"no file {name[:64]!r} here")
        path, media = STATIC[name]
        return FileResponse(path or plotly_js(), media_type=media,
                            headers={"X-Content-Type-Options": "nosniff", "Cache-Control": "max-age=3600"})

    # --- reading -----------------------------------------------------------------------
    async def api_stations(self, request: Request):
        return _ok(self.view.stations())

    async def api_deployment(self, request: Request):
        dep = _id(request.path_params["deployment"], "deployment")
        return _ok(self.view.deployment(dep, self.ctx.annotations))

    async def api_series(self, request: Request):
        dep = _id(request.path_params["deployment"], "deployment")
        q = request.query_params
        try:
            t0 = parse_time(q["start"], "start") if q.get("start") else None
            t1 = parse_time(q["end"], "end") if q.get("end") else None
            columns = int(q.get("columns", "1000"))
        except ValueError as err:
            raise Refused(400, str(err) if "time" in str(err) or "years" in str(err)
                          else "columns: give a whole number of pixel columns") from None
        return _ok(self.view.series(dep, t0, t1, columns))

    async def api_diff(self, request: Request):
        dep = _id(request.path_params["deployment"], "deployment")
        try:
            old = int(request.query_params["from"]) if request.query_params.get("from") else None
            new = int(request.query_params["to"]) if request.query_params.get("to") else None
        except ValueError:
            raise Refused(400, "from and to: give version numbers") from None
        return _ok(self.view.diff(dep, old, new))

    async def api_annotations(self, request: Request):
        station = _id(request.query_params.get("station", ""), "station")
        return _ok({"station": station, "annotations": annotation_rows(self.ctx.annotations, station)})

    # --- writing -----------------------------------------------------------------------
    async def api_add(self, request: Request):
        self.check_write(request)
        body = await self.json_body(request)
        path = self.annotations_path()
        a = self.annotation_from(body)
        self._edit(path, add=a)
        return _ok({"key": annotation_key(a), "annotation": a.as_dict(), "file": path.name}, 201)

    async def api_replace(self, request: Request):
        self.check_write(request)
        body = await self.json_body(request)
        path = self.annotations_path()
        key = self._key(request)
        a = self.annotation_from(body)
        self._edit(path, add=a, replace=key)
        return _ok({"key": annotation_key(a), "annotation": a.as_dict(), "file": path.name})

    async def api_remove(self, request: Request):
        self.check_write(request)
        path = self.annotations_path()
        key = self._key(request)
        self._edit(path, remove=key)
        return _ok({"removed": key, "file": path.name})

    def _key(self, request: Request) -> str:
        key = request.path_params["key"]
        if not (len(key) == 16 and all(c in "0123456789abcdef" for c in key)):
            raise Refused(404, f"no annotation with key {key[:20]!r}")
        return key

    def _edit(self, path: Path, **kw) -> None:
        try:
            edit_annotations(path, **kw)
        except QcpipeError as err:
            status = 404 if "no annotation with key" in str(err) else 400
            raise Refused(status, str(err).replace(str(path), path.name)) from None
        self.reload_annotations()

    async def api_rerun_start(self, request: Request):
        self.check_write(request)
        body = await self.json_body(request)
        dep = _id(body.get("deployment", ""), "deployment")
        self.view.row(dep)
        try:
            return _ok(self.worker.start([dep]), 202)
        except Busy as err:
            raise Refused(409, str(err)) from None

    async def api_rerun_status(self, request: Request):
        return _ok(self.worker.status())


def create_app(workspace: str | Path, *, token: str | None = None, hosts: list[str] | None = None) -> Starlette:
    """The review application over ``workspace``; ``hosts``: the Host names it answers to."""
    review = ReviewApp(workspace, token=token, hosts=hosts)

    def guarded(fn):
        async def endpoint(request: Request):
            try:
                return await fn(request)
            except Refused as err:
                return _error(err.status, err.text)
            except NotFound as err:
                return _error(404, str(err))
            except QcpipeError as err:
                return _error(409, str(err))
        return endpoint

    routes = [
        Route("/", guarded(review.stations_page)),
        Route("/deployment/{deployment}", guarded(review.deployment_page)),
        Route("/static/{name}", guarded(review.static)),
        Route("/api/stations", guarded(review.api_stations)),
        Route("/api/deployment/{deployment}", guarded(review.api_deployment)),
        Route("/api/deployment/{deployment}/series", guarded(review.api_series)),
        Route("/api/deployment/{deployment}/diff", guarded(review.api_diff)),
        Route("/api/annotations", guarded(review.api_annotations), methods=["GET"]),
        Route("/api/annotations", guarded(review.api_add), methods=["POST"]),
        Route("/api/annotations/{key}", guarded(review.api_replace), methods=["PUT"]),
        Route("/api/annotations/{key}", guarded(review.api_remove), methods=["DELETE"]),
        Route("/api/rerun", guarded(review.api_rerun_status), methods=["GET"]),
        Route("/api/rerun", guarded(review.api_rerun_start), methods=["POST"]),
    ]
    app = Starlette(routes=routes, middleware=[Middleware(TrustedHostMiddleware, allowed_hosts=review.hosts)])
    app.state.review = review
    return app


def serve(workspace: str | Path, *, host: str = "127.0.0.1", port: int = 8750, announce=print) -> None:
    """Serve the review page with uvicorn until interrupted; ``announce`` receives the address."""
    import uvicorn

    hosts = ["127.0.0.1", "localhost", "[::1]", "::1"] + ([host] if host not in ("127.0.0.1", "localhost") else [])
    app = create_app(workspace, hosts=hosts)
    shown = f"[{host}]" if ":" in host else host
    announce(f"qcpipe: review page of {Path(workspace).name} at http://{shown}:{port}/ (Ctrl-C stops it)")
    uvicorn.run(app, host=host, port=port, log_level="warning")
