"""Sign-in and roles: hashes, the gate, the rate limiter, server-side role checks."""

import pytest

from dashboard import auth


def test_password_hash_is_salted_scrypt_and_verifies():
    h1, h2 = auth.hash_password("correct horse"), auth.hash_password("correct horse")
    assert h1.startswith("scrypt$16384$8$1$") and h1 != h2  # a fresh salt each time
    assert auth.verify_password("correct horse", h1)
    assert not auth.verify_password("correct horsf", h1)
    assert not auth.verify_password("x", "not-a-hash")
    with pytest.raises(ValueError, match="8 characters"):
        auth.hash_password("short")


def test_gate_redirects_anonymous_pages_but_not_the_wall(live_server):
    import urllib.request

    class NoRedirect(urllib.request.HTTPRedirectHandler):
        def redirect_request(self, *a, **k):
            return None

    opener = urllib.request.build_opener(NoRedirect)
    with pytest.raises(urllib.error.HTTPError) as err:
        opener.open(f"{live_server}/alarms")
    assert err.value.code == 302 and "/login" in err.value.headers["Location"]
    assert opener.open(f"{live_server}/login").status == 200


def test_wrong_password_then_lockout(seeded_engine, demo_site):
    from dashboard.app import create_app

    app = create_app(demo_site, seeded_engine, secret_key="k")
    client = app.server.test_client()
    client.get("/login")
    with client.session_transaction() as s:
        csrf = s["csrf"]
    codes = [client.post("/login", data={"name": "op1", "password": "wrong-password",
                                         "csrf": csrf}).status_code for _ in range(6)]
    assert codes[:5] == [401] * 5 and codes[5] == 429
    # even the right password is refused while the key is locked
    ok = client.post("/login", data={"name": "op1", "password": "operator-pass-1", "csrf": csrf})
    assert ok.status_code == 429


def test_session_cookie_flags(seeded_engine, demo_site, monkeypatch):
    from dashboard.app import create_app

    monkeypatch.delenv("FISHWAY_INSECURE_COOKIES", raising=False)
    app = create_app(demo_site, seeded_engine, secret_key="k")
    client = app.server.test_client()
    client.get("/login")
    with client.session_transaction() as s:
        csrf = s["csrf"]
    r = client.post("/login", data={"name": "sup1", "password": "supervisor-pass-1",
                                    "csrf": csrf})
    assert r.status_code == 302
    cookie = r.headers["Set-Cookie"]
    assert "HttpOnly" in cookie and "SameSite=Strict" in cookie and "Secure" in cookie


def test_require_checks_roles_on_the_server(seeded_engine, demo_site):
    from dashboard.app import create_app

    app = create_app(demo_site, seeded_engine, secret_key="k")
    with app.server.test_request_context("/"):
        import flask

        with pytest.raises(auth.PermissionDenied, match="sign in"):
            auth.require("viewer")
        flask.session["user"] = {"name": "view1", "role": "viewer"}
        assert auth.require("viewer")["name"] == "view1"
        with pytest.raises(auth.PermissionDenied, match="operator"):
            auth.require("operator")


@pytest.mark.parametrize(("payload", "allowed"), [
    ({"outputs": {"id": "wall-clock", "property": "children"}}, True),
    ({"outputs": [[{"id": {"type": "wall-item", "key": "east"}, "property": "children"}]]},
     True),
    ({"outputs": {"id": "_pages_content", "property": "children"}}, True),
    ({"outputs": {"id": "log-entries", "property": "children"}}, False),
    ({"outputs": [{"id": "wall-clock", "property": "children"},
                  {"id": "alarms-table", "property": "children"}]}, False),
    ({}, False),
    (None, False),
])
def test_anonymous_callback_requests_reach_only_the_wall(payload, allowed):
    assert auth.anonymous_callback_allowed(payload) is allowed


def test_anonymous_callback_request_for_a_page_is_refused(seeded_engine, demo_site):
    from dashboard.app import create_app

    app = create_app(demo_site, seeded_engine, secret_key="k")
    client = app.server.test_client()
    body = {"output": "log-entries.children",
            "outputs": {"id": "log-entries", "property": "children"},
            "inputs": [], "changedPropIds": []}
    assert client.post("/_dash-update-component", json=body).status_code == 403
