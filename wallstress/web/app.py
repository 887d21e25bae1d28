"""The Starlette application of ``wallstress serve``: routes, templates, security.

Routes: ``GET /`` the upload form; ``POST /runs`` starts a run; ``GET /runs/{id}`` its progress,
then its summary; ``GET /runs/{id}/files/{name}`` a download from the run's own list;
``POST /runs/{id}/delete`` removes the run's files; ``/static`` the bundled style sheet and the
table-sorting script (no network asset anywhere).

Security: only the hosts the server was started for are answered (a web site cannot reach it by
a DNS name pointing to 127.0.0.1); every response carries a Content-Security-Policy that allows
nothing from elsewhere; forms carry a CSRF token that must match a SameSite=Strict cookie, and a
POST from another origin is refused; a request body above the upload limit is refused before it is
read; a failure shows one message, never a stack trace, and the server keeps running.
"""

from __future__ import annotations

import hmac
import secrets
from pathlib import Path

import jinja2
from starlette.applications import Starlette
from starlette.exceptions import HTTPException
from starlette.middleware import Middleware
from starlette.middleware.trustedhost import TrustedHostMiddleware
from starlette.requests import Request
from starlette.responses import FileResponse, HTMLResponse, RedirectResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles

from wallstress import __version__
from wallstress.analysis.references import list_sets
from wallstress.options import Options
from wallstress.read.studies import STUDY_LIST_SUFFIXES
from wallstress.schema.vocabulary import CLINICAL_CAUTION, FROM_MEMORY_CAUTION, METHOD_CHOICES
from wallstress.web.runs import Runs

HERE = Path(__file__).resolve().parent
CSRF_COOKIE = "wallstress_csrf"
DEFAULT_MAX_UPLOAD_MB = 200
CSP = (
    "default-src 'none'; img-src 'self' data:; style-src 'self'; script-src 'self'; "
    "form-action 'self'; base-uri 'none'; frame-ancestors 'none'"
)
SECURITY_HEADERS = {
    "content-security-policy": CSP,
    "x-content-type-options": "nosniff",
    "referrer-policy": "same-origin",  # "no-referrer" would make a form's Origin "null"
    "x-frame-options": "DENY",
    "cache-control": "no-store",
}
# the options the form offers, each with its choices (from the formula modules' tuples)
FORM_OPTIONS = ("bsa_method", "mass_method", "es_pressure")
OPTION_LABELS = {
    "reference": "Reference set",
    "bsa_method": "BSA formula",
    "mass_method": "LV mass method",
    "es_pressure": "End-systolic pressure",
}


class _TooLarge(Exception):
    pass


class _Guard:
    """ASGI middleware: security headers on every response; request bodies above the limit
    refused with 413 (by their declared length, or while they arrive)."""

    def __init__(self, app, max_body: int):
        self.app, self.max_body = app, max_body

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        started = False

        async def send_with_headers(message):
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
                headers = [
                    (k, v)
                    for k, v in message.get("headers", [])
                    if k.decode().lower() not in SECURITY_HEADERS
                ]
                headers += [(k.encode(), v.encode()) for k, v in SECURITY_HEADERS.items()]
                message = {**message, "headers": headers}
            await send(message)

        declared = dict(scope.get("headers", [])).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.max_body:
            return await _too_large(self.max_body)(scope, receive, send_with_headers)
        seen = 0

        async def counted():
            nonlocal seen
            message = await receive()
            seen += len(message.get("body", b""))
            if seen > self.max_body:
                raise _TooLarge
            return message

        try:
            await self.app(scope, counted, send_with_headers)
        except _TooLarge:
            if not started:
                await _too_large(self.max_body)(scope, receive, send_with_headers)


def _too_large(max_body: int) -> Response:
    mb = max_body / 2**20
    return HTMLResponse(
        _page(
            "error.html",
            message=f"the file is larger than this page takes ({mb:g} MB); "
            "split it, or use the command line (wallstress analyse), which has no such limit",
        ),
        status_code=413,
    )


_env = jinja2.Environment(
    loader=jinja2.FileSystemLoader(str(HERE / "templates")),
    autoescape=True,
    undefined=jinja2.StrictUndefined,
)


def _page(template: str, **context) -> str:
    base = {
        "version": __version__,
        "caution": CLINICAL_CAUTION,
        "memory_caution": FROM_MEMORY_CAUTION,
        "csrf": "",
        "refresh": False,
    }
    return _env.get_template(template).render(**{**base, **context})


def _with_token(request: Request, template: str, status: int = 200, **context) -> HTMLResponse:
    token = request.cookies.get(CSRF_COOKIE) or secrets.token_urlsafe(24)
    response = HTMLResponse(_page(template, csrf=token, **context), status_code=status)
    response.set_cookie(CSRF_COOKIE, token, httponly=True, samesite="strict", path="/")
    return response


def _check_form(request: Request, form) -> None:
    origin = request.headers.get("origin")
    if origin is not None and origin != f"{request.url.scheme}://{request.url.netloc}":
        raise HTTPException(403, "this form can only be sent from the wallstress page itself")
    cookie = request.cookies.get(CSRF_COOKIE, "")
    sent = str(form.get("csrf", ""))
    if not cookie or not hmac.compare_digest(cookie.encode(), sent.encode()):
        raise HTTPException(
            403, "the form's security token is missing or stale; reload the page and send it again"
        )


def _choices() -> dict[str, dict]:
    defaults = Options()
    out = {"reference": {"choices": list_sets(), "default": defaults.reference}}
    for name in FORM_OPTIONS:
        out[name] = {"choices": list(METHOD_CHOICES[name]), "default": getattr(defaults, name)}
    return out


def create_app(
    *,
    store=None,
    max_upload_mb: float = DEFAULT_MAX_UPLOAD_MB,
    runs_root=None,
    workers: int = 2,
    allowed_hosts=("127.0.0.1", "localhost"),
) -> Starlette:
    """The web application. ``store``: a clinic's cohort store the page may follow (named on the
    command line, never by the browser); ``runs_root``: where the private temporary folder of the
    runs is made (default: the system's temporary folder); ``allowed_hosts``: Host headers
    answered."""
    runs = Runs(runs_root, workers=workers)
    choices = _choices()
    store_name = Path(store).name if store else None

    async def index(request: Request):
        return _with_token(
            request,
            "index.html",
            choices=choices,
            labels=OPTION_LABELS,
            accept=",".join(STUDY_LIST_SUFFIXES),
            max_upload_mb=max_upload_mb,
            store_name=store_name,
        )

    async def start(request: Request):
        form = await request.form(max_files=1, max_fields=len(choices) + 4)
        _check_form(request, form)
        upload = form.get("studies")
        if upload is None or isinstance(upload, str) or not upload.filename:
            raise HTTPException(400, "no study list was chosen; choose or drop a file, then send")
        picked = {}
        for name, spec in choices.items():
            value = str(form.get(name) or spec["default"])
            if value not in spec["choices"]:
                raise HTTPException(
                    400, f"{OPTION_LABELS[name]}: {value!r} is not one of the choices"
                )
            picked[name] = value
        data = await upload.read()
        try:
            run = runs.start(upload.filename, data, Options(**picked))
        except ValueError as exc:
            raise HTTPException(400, str(exc)) from exc
        return RedirectResponse(f"/runs/{run.id}", status_code=303)

    async def start_cohort(request: Request):
        form = await request.form(max_files=0, max_fields=len(choices) + 2)
        _check_form(request, form)
        if store is None:
            raise HTTPException(404, "no cohort store was named when this page was started")
        run = runs.start_cohort(
            Path(store), Options(reference=str(form.get("reference") or Options().reference))
        )
        return RedirectResponse(f"/runs/{run.id}", status_code=303)

    def _run(request: Request):
        run = runs.get(request.path_params["run_id"])
        if run is None:
            raise HTTPException(
                404, "this run is not here: it was deleted, it expired, or the server restarted"
            )
        return run

    async def show(request: Request):
        run = _run(request)
        return _with_token(
            request,
            "run.html",
            run=run,
            refresh=run.state in ("waiting", "working"),
            labels=OPTION_LABELS,
        )

    async def download(request: Request):
        run = _run(request)
        path = run.downloads.get(request.path_params["name"])
        if path is None or not path.is_file():
            raise HTTPException(404, "no such file in this run")
        return FileResponse(path, filename=path.name)

    async def delete(request: Request):
        form = await request.form(max_files=0, max_fields=2)
        _check_form(request, form)
        runs.delete(request.path_params["run_id"])
        return RedirectResponse("/", status_code=303)

    async def http_error(request: Request, exc: HTTPException):
        return _with_token(request, "error.html", status=exc.status_code, message=exc.detail)

    async def server_error(request: Request, exc: Exception):
        return HTMLResponse(
            _page(
                "error.html",
                message="unexpected problem on the server; the terminal that runs "
                "'wallstress serve' shows the details",
            ),
            status_code=500,
        )

    def shutdown():
        runs.close()

    from contextlib import asynccontextmanager

    @asynccontextmanager
    async def lifespan(app):
        try:
            yield
        finally:
            shutdown()

    app = Starlette(
        routes=[
            Route("/", index),
            Route("/runs", start, methods=["POST"]),
            Route("/cohort", start_cohort, methods=["POST"]),
            Route("/runs/{run_id}", show),
            Route("/runs/{run_id}/files/{name}", download),
            Route("/runs/{run_id}/delete", delete, methods=["POST"]),
            Mount("/static", StaticFiles(directory=str(HERE / "static")), name="static"),
        ],
        middleware=[  # outermost first: every response, refusals included, gets the headers
            Middleware(_Guard, max_body=int(max_upload_mb * 2**20)),
            Middleware(TrustedHostMiddleware, allowed_hosts=list(allowed_hosts)),
        ],
        exception_handlers={HTTPException: http_error, Exception: server_error},
        lifespan=lifespan,
    )
    app.state.runs = runs
    return app
