"""Sessions that can be revoked, expire, and start fresh; sign-in throttling; safe redirects after sign-in.

Each test reproduces a defect found by adversarial testing: a copied session cookie that still worked
after signing out or a password change, no way to disable, remove or demote a user, a 31-day session,
no sign-in throttling, an open redirect through `next=`, and a CSRF token that outlived the sign-in.
"""

from __future__ import annotations

from urllib.parse import urlsplit

import pytest
from sqlalchemy import select

from library.catalogue import accounts
from library.catalogue.models import AuditEntry
from webui import auth

from web_helpers import PASSWORD, csrf_token, on_both_backends, sign_in


@pytest.fixture
def catalogue(web_catalogue):
    """A copy of the web test catalogue (seed materials and the two accounts)."""
    return web_catalogue


def copy_session(source, target) -> None:
    cookie = source.get_cookie("session")
    target.set_cookie("session", cookie.value)


def api_sign_in(client, username, password=PASSWORD, address="127.0.0.1"):
    token = client.get("/api/session").json["csrf_token"]
    return client.post("/api/session", json={"username": username, "password": password},
                       headers={"X-CSRF-Token": token}, environ_base={"REMOTE_ADDR": address})


def add_admin(catalogue, name="ada"):
    with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
        accounts.create_user(session, name, PASSWORD, "admin")


@on_both_backends
def test_a_copied_cookie_stops_working_after_sign_out(app):
    first, thief = app.test_client(), app.test_client()
    token = api_sign_in(first, "cora").json["csrf_token"]
    copy_session(first, thief)
    assert thief.get("/api/materials").status_code == 200
    assert first.delete("/api/session", headers={"X-CSRF-Token": token}).status_code == 200
    response = thief.get("/api/materials")
    assert response.status_code == 401 and "session was ended" in response.json["error"]["message"]
    # The same through the page's sign-out button.
    browser, thief = app.test_client(), app.test_client()
    token = sign_in(browser, "rhea")
    copy_session(browser, thief)
    assert browser.post("/sign-out", data={"csrf_token": token}).status_code == 302
    assert thief.get("/").status_code == 302


def test_password_change_role_change_disable_and_remove_end_open_sessions(app, catalogue, runner):
    for action, argv, stdin in (("password", ("user", "password", "rhea", "--password-stdin"), "new password 123\n"),
                                ("role", ("user", "role", "rhea", "curator"), None),
                                ("disable", ("user", "disable", "rhea"), None)):
        client = app.test_client()
        password = "new password 123" if action != "password" else PASSWORD
        if action == "password":
            assert api_sign_in(client, "rhea").status_code == 200
        else:
            assert api_sign_in(client, "rhea", password).status_code == 200
        assert client.get("/api/materials").status_code == 200
        code, out, err = runner(*argv, stdin=stdin)
        assert code == 0, err
        assert client.get("/api/materials").status_code == 401, action
    # Disabled: the right password no longer signs in; enabled again, it does.
    assert api_sign_in(app.test_client(), "rhea", "new password 123").status_code == 401
    assert runner("user", "enable", "rhea")[0] == 0
    assert api_sign_in(app.test_client(), "rhea", "new password 123").status_code == 200
    code, out, _ = runner("user", "list", "--format", "csv")
    assert "rhea,curator,enabled" in out
    assert runner("user", "remove", "rhea")[0] == 0
    assert api_sign_in(app.test_client(), "rhea", "new password 123").status_code == 401
    code, _, err = runner("user", "remove", "rhea")
    assert code == 2 and "no user 'rhea'" in err
    with catalogue.reading() as session:
        fields = set(session.scalars(select(AuditEntry.field).where(AuditEntry.entity == "user")))
    assert {"password", "role", "disabled"} <= fields


def test_admins_manage_accounts_in_the_web_and_changes_take_effect_at_once(app, catalogue):
    add_admin(catalogue)
    admin, victim, curator = app.test_client(), app.test_client(), app.test_client()
    token = sign_in(admin, "ada")
    sign_in(victim, "rhea")
    curator_token = sign_in(curator, "cora")
    page = admin.get("/accounts")
    assert page.status_code == 200 and "rhea" in page.text and "your own account" in page.text
    assert curator.get("/accounts").status_code == 403
    assert curator.post("/accounts", data={"csrf_token": curator_token, "username": "rhea",
                                           "action": "remove"}).status_code == 403
    response = admin.post("/accounts", data={"csrf_token": token, "username": "rhea", "action": "disable"})
    assert response.status_code == 302
    assert victim.get("/").status_code == 302  # sent to sign in
    response = admin.post("/accounts", data={"csrf_token": token, "username": "cora", "action": "role",
                                             "role": "reader"})
    assert response.status_code == 302
    assert curator.get("/").status_code == 302  # the demoted curator's session ended too
    sign_in(curator, "cora")
    assert curator.post("/api/vocabulary", json={"term": "marine"},
                        headers={"X-CSRF-Token": csrf_token(curator)}).status_code == 403
    response = admin.post("/accounts", data={"csrf_token": token, "username": "ada", "action": "disable"})
    assert response.status_code == 400 and "your own account" in response.text
    response = admin.post("/accounts", data={"csrf_token": token, "username": "nobody", "action": "remove"})
    assert response.status_code == 400 and "no user" in response.text


def test_sessions_expire_after_their_lifetime_and_when_idle(app, monkeypatch):
    clock = [1_000_000.0]
    monkeypatch.setattr(auth, "now", lambda: clock[0])
    assert app.config["OLIBRA_SESSION_HOURS"] == 8 and app.config["OLIBRA_IDLE_MINUTES"] == 60
    assert app.permanent_session_lifetime.total_seconds() == 8 * 3600
    client = app.test_client()
    assert api_sign_in(client, "rhea").status_code == 200
    for _ in range(8):  # used every 59 minutes (472 minutes in all): never idle
        clock[0] += 59 * 60
        assert client.get("/api/materials").status_code == 200
    clock[0] += 59 * 60  # but the 8-hour lifetime ends it
    response = client.get("/api/materials")
    assert response.status_code == 401 and "older than 8 hours" in response.json["error"]["message"]
    assert api_sign_in(client, "rhea").status_code == 200
    clock[0] += 61 * 60
    response = client.get("/api/materials")
    assert response.status_code == 401 and "idle for more than 60 minutes" in response.json["error"]["message"]


def test_sign_in_rotates_the_csrf_token(app):
    client = app.test_client()
    before = client.get("/api/session").json["csrf_token"]
    response = client.post("/api/session", json={"username": "cora", "password": PASSWORD},
                           headers={"X-CSRF-Token": before})
    after = response.json["csrf_token"]
    assert after != before
    stale = client.post("/api/vocabulary", json={"term": "petrichor"}, headers={"X-CSRF-Token": before})
    assert stale.status_code == 400 and "security token" in stale.json["error"]["message"]
    fresh = client.post("/api/vocabulary", json={"term": "petrichor"}, headers={"X-CSRF-Token": after})
    assert fresh.status_code == 201


# Open-redirect payloads: the usual families from the OWASP "Unvalidated Redirects and Forwards Cheat
# Sheet" and PortSwigger's open-redirection notes (scheme-relative, backslash, whitespace and control
# characters that browsers strip, encoded slashes, userinfo, schemes).
OPEN_REDIRECT_PAYLOADS = [
    "//example.org", "///example.org", "////example.org", "/\\example.org", "\\\\example.org", "/\t/example.org",
    "/\n/example.org", "/\r/example.org", "/ /example.org", "/\x00/example.org", "/\x0b/example.org",
    "/\u3000/example.org", "/\u200b/example.org", "\t//example.org", " //example.org",
    "https://example.org", "http:example.org", "javascript:alert(1)", "JaVaScRiPt:alert(1)",
    "data:text/html,<script>alert(1)</script>", "//example.org/%2f..", "/%2F%2Fexample.org",
    "//@example.org", "/\\/example.org", "/.\\example.org", "example.org", "@example.org", "//example.org:80",
    "/%5Cexample.org", "//%09example.org", "https:/\\example.org", "\x7f//example.org",
]


@pytest.mark.parametrize("payload", OPEN_REDIRECT_PAYLOADS)
def test_sign_in_never_redirects_off_site(client, payload):
    token = csrf_token(client)
    response = client.post("/sign-in", query_string={"next": payload},
                           data={"username": "rhea", "password": PASSWORD, "csrf_token": token})
    assert response.status_code == 302, response.status_code
    location = response.headers["Location"]
    # What a browser would follow: tabs and newlines dropped, backslashes read as slashes.
    followed = "".join(c for c in location if c not in "\t\n\r").replace("\\", "/")
    parts = urlsplit(followed)
    assert not parts.scheme and not parts.netloc and followed.startswith("/") and not followed.startswith("//"), \
        location


def test_a_same_site_next_is_kept(client):
    token = csrf_token(client)
    response = client.post("/sign-in", query_string={"next": "/materials/1?tab=history"},
                           data={"username": "rhea", "password": PASSWORD, "csrf_token": token})
    assert response.headers["Location"] == "/materials/1?tab=history"


def test_wrong_passwords_are_slowed_down_then_the_right_one_waits_too(app, catalogue):
    clock = [0.0]
    app.extensions["olibra_throttle"].clock = lambda: clock[0]
    client = app.test_client()
    statuses = [api_sign_in(client, "cora", "wrong password").status_code for _ in range(5)]
    assert statuses == [401] * 5
    refused = api_sign_in(client, "cora")  # the right password, during the back-off
    assert refused.status_code == 429 and refused.headers["Retry-After"] == "1"
    assert "wait 1 s" in refused.json["error"]["message"]
    clock[0] += 1.0
    assert api_sign_in(client, "cora", "wrong again").status_code == 401
    assert api_sign_in(client, "cora").headers["Retry-After"] == "2"  # the back-off doubled
    clock[0] += 2.0
    assert api_sign_in(client, "cora").status_code == 200
    with catalogue.reading() as session:
        throttled = session.scalars(select(AuditEntry.new_value).where(AuditEntry.action == "sign-in throttled")).all()
    assert len(throttled) == 2 and "waits 1 s" in throttled[0] and "waits 2 s" in throttled[1]


def test_an_attacker_cannot_lock_the_real_user_out(app):
    clock = [0.0]
    app.extensions["olibra_throttle"].clock = lambda: clock[0]
    attacker = app.test_client()
    for _ in range(60):  # far past every allowance, from one address
        assert api_sign_in(attacker, "cora", "guess", address="10.9.9.9").status_code in (401, 429)
        clock[0] += 0.5
    for i in range(30):  # and from many: the account is now under attack
        assert api_sign_in(attacker, "cora", "guess", address=f"10.8.0.{i}").status_code == 401
    # The real user, from their own address, signs in at once with the right password.
    assert api_sign_in(app.test_client(), "cora", address="127.0.0.1").status_code == 200
    # A new address guessing the attacked account gets one try before its back-off starts.
    second = app.test_client()
    assert api_sign_in(second, "cora", "guess", address="10.9.9.10").status_code == 401
    assert api_sign_in(second, "cora", "guess", address="10.9.9.10").status_code == 429
    # The attacker's back-off is bounded (15 minutes) and forgotten after it: never a lockout for good.
    assert app.extensions["olibra_throttle"].wait_s("cora", "10.9.9.9") <= 900
    clock[0] += 901
    assert api_sign_in(attacker, "cora", address="10.9.9.9").status_code == 200


def test_one_address_cannot_walk_through_many_accounts(app):
    clock = [0.0]
    app.extensions["olibra_throttle"].clock = lambda: clock[0]
    client = app.test_client()
    statuses = [api_sign_in(client, f"user{i}", "guess", address="10.1.1.1").status_code for i in range(21)]
    assert statuses[:20] == [401] * 20 and statuses[20] == 429
    assert api_sign_in(app.test_client(), "rhea", address="10.1.1.2").status_code == 200
