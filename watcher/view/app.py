"""The read-only floor page (``ionwarden serve``): a Starlette app over a ``FloorSource``.

Routes (GET and HEAD only; anything else is 405):

- ``/``: every instrument as a tile (status now, time since its last run, open problems);
- ``/instrument/{name}?from=YYYY-MM-DD&to=YYYY-MM-DD``: its last runs, open alerts and charts
  over the chosen days (the instrument's local days, both included; default the last 7);
- ``/api/mark``: ``{"mark": ...}``, which changes when any instrument gets a new judged run or
  its open alerts change; the page's small inline script polls it and replaces the page's
  ``<main>`` with ``?part=main`` of the same address, so it refreshes without a reload. With
  JavaScript off everything but that refresh works (links and a plain GET form);
- ``/metrics``: the Prometheus/OpenMetrics numbers of every instrument (``watcher.view.metrics``).

What it never does: write, fetch anything from the internet (CSS, script and charts are inline),
show a URL, a secret or a server path (file names only, error texts cut by
``sqlite_source.strip_paths``), or trust an input: the instrument must be one of the configured
names (else 404), dates must be ``YYYY-MM-DD`` with ``from`` <= ``to`` and at most
``MAX_RANGE_DAYS`` apart (else 400 with the reason). Templates autoescape every value; the
Content-Security-Policy allows only this page's own inline script (a fresh nonce per page) and
connections to itself. With ``serve.token`` set, every request needs it: ``Authorization:
Bearer TOKEN``, or the cookie set by opening any page once with ``?token=TOKEN`` (it then
redirects to the address without it, so the token does not stay in the history or the logs).
"""

from __future__ import annotations

import hmac
import re
import secrets
import time
from datetime import UTC, date, datetime, timedelta
from datetime import time as dtime
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import quote, urlencode
from zoneinfo import ZoneInfo

from jinja2 import Environment, FileSystemLoader, select_autoescape
from starlette.applications import Starlette
from starlette.responses import (
    HTMLResponse,
    JSONResponse,
    PlainTextResponse,
    RedirectResponse,
    Response,
)
from starlette.routing import Route

from watcher.rules.finding_text import subject_of
from watcher.view.charts import instrument_charts
from watcher.view.metrics import registry_for

if TYPE_CHECKING:
    from starlette.requests import Request
    from starlette.types import ASGIApp, Receive, Scope, Send

    from watcher.view.source import FloorSource, InstrumentNow

MAX_RANGE_DAYS = 92  # a quarter: longer ranges are an archive query, not a page
DEFAULT_DAYS = 7
RUNS_SHOWN = 50  # newest runs listed in the instrument's table
RUNS_CHARTED = 20000  # at most this many runs of the range are read and drawn
MAX_NAME_CHARS = 200
COOKIE = "ionwarden_token"
_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")
_RANK = {"ok": 0, "notice": 1, "warning": 2, "critical": 3, "unreadable": 4}
_TEMPLATES = Path(__file__).with_name("templates")


class BadInput(Exception):
    """An input the page refuses: 400 with this one-line reason."""


def age_text(seconds: float) -> str:
    """``42 s``, ``17 min``, ``3.5 h``, ``4 d``: how long ago, for a tile."""
    seconds = max(0.0, seconds)
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    if seconds < 72 * 3600:
        return f"{seconds / 3600:.1f} h"
    return f"{seconds / 86400:.0f} d"


def status_now(now: InstrumentNow) -> str:
    """The tile's colour: the worse of the last run's status and the open problems' severity
    (an alert stays open until a later run clears it); ``unknown`` without a readable store,
    ``no runs`` before the first."""
    if not now.available:
        return "unknown"
    states = [p.severity for p in now.problems]
    if now.last_run is not None:
        states.append(now.last_run.status)
    if not states:
        return "no runs"
    return max(states, key=lambda s: _RANK.get(s, 0))


def parse_range(query: dict[str, str], tz: ZoneInfo, today: date) -> tuple[date, date]:
    """``from``/``to`` (local dates, both included) from the query, validated (BadInput)."""
    values: dict[str, date] = {}
    for key in ("from", "to"):
        text = query.get(key)
        if text is None or text == "":
            continue
        if len(text) != 10 or not _DATE.fullmatch(text):
            raise BadInput(f"{key}: expected a date YYYY-MM-DD")
        try:
            values[key] = date.fromisoformat(text)
        except ValueError:
            raise BadInput(f"{key}: no such date") from None
    end = values.get("to", today)
    start = values.get("from", end - timedelta(days=DEFAULT_DAYS - 1))
    if start > end:
        raise BadInput("from: must not be after to")
    if (end - start).days + 1 > MAX_RANGE_DAYS:
        raise BadInput(f"range too long: at most {MAX_RANGE_DAYS} days")
    return start, end


class TokenGate:
    """ASGI middleware: every request carries the token, else 401 (see the module docstring)."""

    def __init__(self, app: ASGIApp, token: str) -> None:
        self._app = app
        self._token = token.encode()

    def _ok(self, candidate: str | None) -> bool:
        return candidate is not None and hmac.compare_digest(candidate.encode(), self._token)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self._app(scope, receive, send)
            return
        from starlette.requests import Request

        request = Request(scope)
        given = request.query_params.get("token")
        if given is not None and self._ok(given):
            rest = [(k, v) for k, v in request.query_params.multi_items() if k != "token"]
            target = request.url.path + (f"?{urlencode(rest)}" if rest else "")
            response: Response = RedirectResponse(target, status_code=303)
            https = request.url.scheme == "https"
            response.set_cookie(COOKIE, given, httponly=True, samesite="strict", secure=https)
            await response(scope, receive, send)
            return
        auth = request.headers.get("authorization", "")
        bearer = auth[7:] if auth.lower().startswith("bearer ") else None
        if self._ok(bearer) or self._ok(request.cookies.get(COOKIE)):
            await self._app(scope, receive, send)
            return
        response = PlainTextResponse(
            "401: this page needs its token (serve.token): open it once with ?token=..., or "
            "send Authorization: Bearer ...\n",
            status_code=401,
            headers={"WWW-Authenticate": "Bearer"},
        )
        await response(scope, receive, send)


def build_app(
    source: FloorSource,
    *,
    token: str | None = None,
    refresh_s: float = 3.0,
    clock: Any = time.time,
) -> ASGIApp:
    """The page server's ASGI app over ``source``; ``token`` set: every request needs it."""
    env = Environment(
        loader=FileSystemLoader(_TEMPLATES),
        autoescape=select_autoescape(default=True, default_for_string=True),
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["q"] = lambda s: quote(str(s), safe="")
    registry = registry_for(source)

    def page(request: Request, template: str, context: dict[str, Any], mark: str) -> Response:
        nonce = secrets.token_urlsafe(16)
        part = request.query_params.get("part") == "main"
        html = env.get_template(template).render(
            **context, part=part, mark=mark, nonce=nonce, refresh_ms=int(refresh_s * 1000)
        )
        return HTMLResponse(html, headers=_headers(nonce))

    def bad(message: str, status: int = 400) -> Response:
        body = env.from_string(
            "<!doctype html><meta charset=utf-8><title>{{ code }}</title>"
            '<p>{{ code }}: {{ message }}</p><p><a href="/">all instruments</a></p>'
        ).render(code=status, message=message)
        return HTMLResponse(body, status_code=status, headers=_headers(None))

    def floor(request: Request) -> Response:
        mark = source.change_mark()
        now_s = clock()
        tiles = [_tile(i, now_s, source) for i in source.instruments()]
        return page(request, "floor.html", {"tiles": tiles}, mark)

    def instrument(request: Request) -> Response:
        name = request.path_params["name"]
        if len(name) > MAX_NAME_CHARS or any(ord(c) < 32 or ord(c) == 127 for c in name):
            return bad("instrument: not a valid instrument name")
        if name not in source.names():  # asked each time: a central store gains instruments
            return bad(f"no instrument named {name!r} here", 404)
        tz = ZoneInfo(source.timezone(name))
        now_s = clock()
        today = datetime.fromtimestamp(now_s, tz).date()
        try:
            first, last = parse_range(dict(request.query_params), tz, today)
        except BadInput as exc:
            return bad(str(exc))
        start = datetime.combine(first, dtime(0), tz).astimezone(UTC)
        end = datetime.combine(last + timedelta(days=1), dtime(0), tz).astimezone(UTC)
        mark = source.change_mark()
        now = source.instrument(name)
        runs = source.runs(name, start, end, limit=RUNS_CHARTED) if now.available else []
        charts = instrument_charts(source, name, runs, start=start, end=end, tz=tz)
        context = {
            "tile": _tile(now, now_s, source),
            "name": name,
            "first": first.isoformat(),
            "last": last.isoformat(),
            "runs": [_run_row(r, tz) for r in reversed(runs[-RUNS_SHOWN:])],
            "run_count": len(runs),
            "charts": charts,
            "max_days": MAX_RANGE_DAYS,
        }
        return page(request, "instrument.html", context, mark)

    def api_mark(request: Request) -> Response:
        return JSONResponse({"mark": source.change_mark()}, headers={"Cache-Control": "no-store"})

    def metrics(request: Request) -> Response:
        from prometheus_client.exposition import choose_encoder

        encoder, content_type = choose_encoder(request.headers.get("accept", ""))
        return Response(encoder(registry), media_type=content_type)

    app: ASGIApp = Starlette(
        routes=[
            Route("/", floor, methods=["GET", "HEAD"]),
            Route("/instrument/{name:str}", instrument, methods=["GET", "HEAD"]),
            Route("/api/mark", api_mark, methods=["GET", "HEAD"]),
            Route("/metrics", metrics, methods=["GET", "HEAD"]),
        ]
    )
    if token:
        app = TokenGate(app, token)
    return app


def _headers(nonce: str | None) -> dict[str, str]:
    script = f"'nonce-{nonce}'" if nonce else "'none'"
    return {
        "Content-Security-Policy": (
            f"default-src 'none'; style-src 'unsafe-inline'; script-src {script}; "
            "img-src 'self' data:; connect-src 'self'; form-action 'self'; "
            "frame-ancestors 'none'; base-uri 'none'"
        ),
        "X-Content-Type-Options": "nosniff",
        "Referrer-Policy": "no-referrer",
        "Cache-Control": "no-store",
    }


def _local(at: datetime, tz: ZoneInfo) -> str:
    return at.astimezone(tz).strftime("%Y-%m-%d %H:%M")


def _tile(now: InstrumentNow, now_s: float, source: FloorSource) -> dict[str, Any]:
    tz = ZoneInfo(source.timezone(now.name))
    run = now.last_run
    return {
        "name": now.name,
        "status": status_now(now),
        "available": now.available,
        "note": now.note,
        "last_status": None if run is None else run.status,
        "last_file": None if run is None else run.file_name,
        "last_at": None if run is None else _local(run.acquired_at, tz),
        "age": None if run is None else age_text(now_s - run.acquired_at.timestamp()),
        "queue": now.queue_length,
        "pending": now.messages_pending,
        "problems": [
            {
                "severity": p.severity,
                "check": p.check,
                "subject": subject_of(p.subject) if "." in p.subject else p.subject,
                "since": _local(p.since, tz),
                "run_file": p.run_file,
                "value": "" if p.value is None else _value(p.value),
            }
            for p in sorted(now.problems, key=lambda p: -_RANK.get(p.severity, 0))
        ],
    }


def _value(value: float | bool) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    return f"{value:.4g}"


def _run_row(run: Any, tz: ZoneInfo) -> dict[str, Any]:
    return {
        "at": _local(run.acquired_at, tz),
        "file": run.file_name,
        "status": run.status,
        "error": run.error,
        "findings": [f"{f.severity}: {f.message}" for f in run.findings],
    }
