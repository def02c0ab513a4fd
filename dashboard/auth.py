"""Sign-in, roles and sessions.

Roles, lowest first: ``viewer`` (read-only; the wall display needs no sign-in at all),
``operator`` (acknowledge and shelve alarms, write log entries), ``supervisor`` (targets,
alarm limits, users). Every write is checked on the server, in the callback, with
:func:`require` — hiding a button is not a check.

Passwords are stored as salted scrypt hashes (RFC 7914; ``hashlib.scrypt``, N = 2^14, r = 8,
p = 1). Sessions are Flask's signed cookies, HttpOnly and SameSite=Strict, Secure unless
``FISHWAY_INSECURE_COOKIES=1`` (only for a plain-http test bench: browsers treat localhost as
secure). Log-in attempts are rate-limited per client address and per user name
(:data:`MAX_FAILURES` failures in :data:`FAILURE_WINDOW_S` lock that key for the rest of the
window); the limiter lives in the process, so each server process keeps its own count.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import os
import secrets
import threading
import time
from collections import defaultdict, deque
from datetime import UTC, datetime

import flask
from sqlalchemy.engine import Engine

from db.catalog import add_user, get_user

__all__ = [
    "FAILURE_WINDOW_S",
    "MAX_FAILURES",
    "ROLES",
    "PermissionDenied",
    "anonymous_callback_allowed",
    "create_user",
    "current_user",
    "guard",
    "has_role",
    "hash_password",
    "install",
    "require",
    "verify_password",
]

ROLES = ("viewer", "operator", "supervisor")
MAX_FAILURES = 5
FAILURE_WINDOW_S = 300.0
_SCRYPT = {"n": 2**14, "r": 8, "p": 1, "dklen": 32}
OPEN_PATHS = ("/login", "/logout", "/wall", "/assets/", "/_dash-", "/_reload-hash",
              "/_favicon.ico", "/favicon.ico")
"""Paths served without a session. Dash's own routes must stay open for the wall display, so
callback requests are checked on their own: see :func:`anonymous_callback_allowed`."""

ANONYMOUS_OUTPUT_PREFIXES = ("wall", "_pages_")
"""A callback request without a session may only update components whose id starts so: the
wall display's and Dash's page routing (every page layout but the wall's starts with
:func:`guard`). Anything else is refused with 403 before any callback runs."""


def _output_ids(payload: object) -> list[str]:
    outputs = payload.get("outputs") if isinstance(payload, dict) else None
    items = outputs if isinstance(outputs, list) else [outputs]
    ids: list[str] = []
    for item in items:
        if isinstance(item, list):  # a multi-output callback with ALL/MATCH wildcards
            ids.extend(_output_ids({"outputs": item}))
            continue
        cid = item.get("id") if isinstance(item, dict) else None
        if isinstance(cid, dict):  # pattern-matching id: judge by its "type"
            cid = cid.get("type")
        ids.append(cid if isinstance(cid, str) else "")
    return ids


def anonymous_callback_allowed(payload: object) -> bool:
    """Whether a callback request (its JSON body) may run without a session."""
    ids = _output_ids(payload)
    return bool(ids) and all(i.startswith(ANONYMOUS_OUTPUT_PREFIXES) for i in ids)


class PermissionDenied(PermissionError):  # noqa: N818 - reads better at the call sites
    """The signed-in user's role does not allow this action."""


def hash_password(password: str) -> str:
    """A salted scrypt hash, ``scrypt$N$r$p$salt$hash`` (base64)."""
    if len(password) < 8:
        raise ValueError("a password needs at least 8 characters")
    salt = secrets.token_bytes(16)
    digest = hashlib.scrypt(password.encode(), salt=salt, **_SCRYPT)
    b64 = base64.b64encode
    return (f"scrypt${_SCRYPT['n']}${_SCRYPT['r']}${_SCRYPT['p']}$"
            f"{b64(salt).decode()}${b64(digest).decode()}")


def verify_password(password: str, stored: str) -> bool:
    """Whether ``password`` matches ``stored`` (constant-time comparison)."""
    try:
        scheme, n, r, p, salt, digest = stored.split("$")
        if scheme != "scrypt":
            return False
        want = base64.b64decode(digest)
        got = hashlib.scrypt(password.encode(), salt=base64.b64decode(salt), n=int(n),
                             r=int(r), p=int(p), dklen=len(want))
    except (ValueError, TypeError):
        return False
    return hmac.compare_digest(got, want)


def create_user(engine: Engine, name: str, role: str, password: str) -> int:
    """Add a user with a hashed password; ``ValueError`` for a bad role, name or password."""
    if role not in ROLES:
        raise ValueError(f"role must be one of {', '.join(ROLES)}, got {role!r}")
    if not name or len(name) > 100 or not name.replace("_", "").replace(".", "").isalnum():
        raise ValueError("a user name is 1–100 letters, digits, '.' or '_'")
    if get_user(engine, name) is not None:
        raise ValueError(f"user {name!r} exists already")
    return add_user(engine, name, role, hash_password(password), now=datetime.now(UTC))


def current_user() -> dict | None:
    """``{"name", "role"}`` of the signed-in user of this request, or None."""
    if not flask.has_request_context():
        return None
    user = flask.session.get("user")
    return dict(user) if isinstance(user, dict) else None


def has_role(role: str, user: dict | None = None) -> bool:
    user = user if user is not None else current_user()
    if user is None:
        return False
    return ROLES.index(user.get("role", "viewer")) >= ROLES.index(role)


def require(role: str) -> dict:
    """The signed-in user if their role is at least ``role``; else :class:`PermissionDenied`."""
    user = current_user()
    if user is None:
        raise PermissionDenied("sign in first")
    if not has_role(role, user):
        raise PermissionDenied(f"this needs the {role} role; {user['name']} is {user['role']}")
    return user


class _Limiter:
    def __init__(self) -> None:
        self._fails: dict[str, deque[float]] = defaultdict(deque)
        self._lock = threading.Lock()

    def blocked(self, *keys: str, now: float) -> bool:
        with self._lock:
            for key in keys:
                q = self._fails[key]
                while q and now - q[0] > FAILURE_WINDOW_S:
                    q.popleft()
                if len(q) >= MAX_FAILURES:
                    return True
        return False

    def fail(self, *keys: str, now: float) -> None:
        with self._lock:
            for key in keys:
                self._fails[key].append(now)

    def clear(self, *keys: str) -> None:
        with self._lock:
            for key in keys:
                self._fails.pop(key, None)


_LOGIN_PAGE = """<!doctype html><html lang="en"><head><meta charset="utf-8">
<title>Sign in — {{ site }}</title><link rel="stylesheet" href="/assets/style.css"></head>
<body class="login-body"><form class="login" method="post" action="/login">
<h1>{{ site }}</h1><p>Fishway operations — sign in</p>
{% if message %}<p class="login-error" role="alert">{{ message }}</p>{% endif %}
<label>User name <input name="name" autocomplete="username" required autofocus></label>
<label>Password <input name="password" type="password" autocomplete="current-password"
required></label><input type="hidden" name="csrf" value="{{ csrf }}">
<input type="hidden" name="next" value="{{ next }}">
<button type="submit">Sign in</button>
<p class="login-wall"><a href="/wall">Wall display (no sign-in, read-only)</a></p>
</form></body></html>"""


def install(server: flask.Flask, engine: Engine, *, wall_only: bool = False) -> None:
    """Cookie settings, the sign-in gate and the /login and /logout routes on ``server``."""
    insecure = os.environ.get("FISHWAY_INSECURE_COOKIES") == "1"
    server.config.update(SESSION_COOKIE_HTTPONLY=True, SESSION_COOKIE_SAMESITE="Strict",
                         SESSION_COOKIE_SECURE=not insecure, SESSION_COOKIE_NAME="fishway",
                         PERMANENT_SESSION_LIFETIME=12 * 3600)
    limiter = _Limiter()
    site_name = "fishway-ops"
    try:
        from dashboard.context import current

        site_name = current().site.site.name
    except RuntimeError:
        pass

    @server.before_request
    def _gate() -> flask.Response | tuple[str, int] | None:
        path = flask.request.path
        if path == "/_dash-update-component" and current_user() is None:
            payload = flask.request.get_json(silent=True)
            if not anonymous_callback_allowed(payload):
                return "sign in first", 403
            return None
        if wall_only:
            if path == "/" or path.startswith(OPEN_PATHS):
                return None if path != "/" else flask.redirect("/wall")
            return flask.redirect("/wall")
        if path.startswith(OPEN_PATHS) or current_user() is not None:
            return None
        return flask.redirect(f"/login?next={flask.request.full_path}")

    def page(message: str = "", status: int = 200) -> tuple[str, int]:
        csrf = flask.session.get("csrf") or secrets.token_urlsafe(24)
        flask.session["csrf"] = csrf
        nxt = flask.request.values.get("next", "/")
        if not nxt.startswith("/") or nxt.startswith("//"):
            nxt = "/"
        return flask.render_template_string(_LOGIN_PAGE, site=site_name, message=message,
                                            csrf=csrf, next=nxt), status

    @server.route("/login", methods=["GET", "POST"])
    def _login() -> object:
        if wall_only:
            return flask.redirect("/wall")
        if flask.request.method == "GET":
            return page()
        form = flask.request.form
        name = form.get("name", "")[:100]
        client = flask.request.remote_addr or "?"
        now = time.monotonic()
        if not secrets.compare_digest(form.get("csrf", ""), flask.session.get("csrf", "")):
            return page("The form expired: please sign in again.", 400)
        if limiter.blocked(f"ip:{client}", f"user:{name}", now=now):
            return page("Too many failed attempts: wait a few minutes, then try again.", 429)
        user = get_user(engine, name)
        if user is None or not user.get("active", True) or not verify_password(
                form.get("password", ""), user["password_hash"]):
            limiter.fail(f"ip:{client}", f"user:{name}", now=now)
            return page("User name or password not recognised.", 401)
        limiter.clear(f"user:{name}")
        flask.session.clear()
        flask.session["user"] = {"name": user["name"], "role": user["role"]}
        flask.session.permanent = True
        nxt = form.get("next", "/")
        return flask.redirect(nxt if nxt.startswith("/") and not nxt.startswith("//") else "/")

    @server.route("/logout", methods=["GET", "POST"])
    def _logout() -> object:
        flask.session.clear()
        return flask.redirect("/login")


def guard(role: str = "viewer") -> object | None:
    """For a page's ``layout()``: None when the user may see it, else a short notice to show
    instead (Dash renders pages through its callback route, which the sign-in gate leaves
    open, so every page except the wall calls this first)."""
    from dash import dcc, html

    user = current_user()
    if user is None:
        return html.Div(className="panel", children=[
            html.P("Sign in to see this page."), dcc.Link("Sign in", href="/login"),
            " · ", dcc.Link("Wall display", href="/wall")])
    if not has_role(role, user):
        return html.Div(f"This page needs the {role} role.", className="panel")
    return None
