"""Sign-in, sessions, lock-out and the write gate (dashboard.auth), through Flask's test client on a real store."""

from __future__ import annotations

import re
import time

import pytest

from analysis.store import Store
from tests.conftest import add_people

PASSWORD = "a long enough password"


@pytest.fixture
def people(store_copy):
    """The filled store's copy with a viewer, a technician and a method owner."""
    return add_people(store_copy, [("vera", "viewer"), ("tom", "technician"), ("olga", "method_owner")],
                      password=PASSWORD)


def _app(url, tmp_path, **kw):
    from dashboard import create_app

    return create_app(url, cache_dir=tmp_path / "cache", **kw)


def _token(client, path="/signin"):
    page = client.get(path).get_data(as_text=True)
    return re.search(r"name='csrf' value='([^']+)'", page).group(1)


def _sign_in(client, name, password=PASSWORD, next_url="/"):
    return client.post("/signin", data={"csrf": _token(client), "user_name": name, "password": password,
                                        "next": next_url})


def _audit(url):
    with Store.open(url, create=False) as store:
        return store.audit_log()


def test_a_closed_server_lets_nobody_read_before_signing_in(people, tmp_path):
    client = _app(people, tmp_path).server.test_client()
    r = client.get("/lots?rig=NF-R1")
    assert r.status_code == 302 and r.headers["Location"] == "/signin?next=/lots%3Frig%3DNF-R1"
    assert client.get("/health").status_code == 200
    assert client.get("/_dash-layout").status_code == 401
    assert client.get("/audio/1").status_code == 401
    assert client.get("/signin").status_code == 200


def test_signing_in_with_the_right_password_and_the_cookie_it_sets(people, tmp_path):
    client = _app(people, tmp_path).server.test_client()
    bad = _sign_in(client, "tom", "not his password")
    assert bad.status_code == 401 and "Unknown user name or wrong password" in bad.get_data(as_text=True)
    good = _sign_in(client, "tom", next_url="/lots")
    assert good.status_code == 302 and good.headers["Location"] == "/lots"
    cookie = good.headers["Set-Cookie"]
    assert "HttpOnly" in cookie and "SameSite=Strict" in cookie and "Secure" not in cookie
    assert client.get("/lots").status_code == 200
    assert client.get("/_dash-layout").status_code == 200
    log = _audit(people)
    assert list(log.loc[log["action"].str.startswith("auth."), "action"]) == ["auth.failed", "auth.signin"]
    assert (log.loc[log["action"] == "auth.signin", "person"] == "tom").all()
    assert not log["detail"].str.contains(PASSWORD).any()
    # signing out needs the form's token, and ends the session
    assert client.post("/signout", data={"csrf": "forged"}).status_code == 400
    out = client.post("/signout", data={"csrf": _token(client, "/signin")})
    assert out.status_code == 302 and client.get("/lots").status_code == 302


def test_a_next_address_off_this_server_is_not_followed(people, tmp_path):
    client = _app(people, tmp_path).server.test_client()
    for evil in ("//evil.example/x", "https://evil.example/", "\\\\evil"):
        assert _sign_in(client, "tom", next_url=evil).headers["Location"] == "/"
        client.post("/signout", data={"csrf": _token(client)})


def test_five_failures_in_fifteen_minutes_lock_the_user_name(people, tmp_path):
    client = _app(people, tmp_path).server.test_client()
    for _ in range(5):
        assert _sign_in(client, "olga", "wrong wrong wrong").status_code == 401
    locked = _sign_in(client, "olga")  # the right password, now refused
    assert locked.status_code == 429 and "Too many failed sign-ins for olga" in locked.get_data(as_text=True)
    assert client.get("/").status_code == 302
    log = _audit(people)
    assert (log["action"] == "auth.locked").sum() == 1 and (log["action"] == "auth.failed").sum() == 5
    assert _sign_in(client, "tom").status_code == 302  # another user name is not locked


def test_an_idle_session_ends(people, tmp_path):
    client = _app(people, tmp_path, idle_minutes=2.0 / 60).server.test_client()
    _sign_in(client, "tom")
    assert client.get("/").status_code == 200
    time.sleep(2.5)
    assert client.get("/").status_code == 302
    assert (_audit(people)["action"] == "auth.idle_timeout").sum() == 1


def test_open_reading_reads_without_signing_in_but_never_writes(people, tmp_path):
    from dashboard import auth

    auth.require("test-write-target", "technician")
    try:
        client = _app(people, tmp_path, open_reading=True).server.test_client()
        assert client.get("/lots").status_code == 200 and client.get("/_dash-layout").status_code == 200
        body = {"output": "test-write-target.children", "outputs": {"id": "test-write-target",
                                                                    "property": "children"},
                "inputs": [], "state": [{"id": "app-user", "property": "data", "value": "tom"}]}
        r = client.post("/_dash-update-component", json=body)
        assert r.status_code == 403 and "not signed in" in r.get_data(as_text=True)
        _sign_in(client, "vera")  # a viewer's session
        r = client.post("/_dash-update-component", json={**body, "state": [
            {"id": "app-user", "property": "data", "value": "vera"}]})
        assert r.status_code == 403 and "role viewer does not include technician" in r.get_data(as_text=True)
        client.post("/signout", data={"csrf": _token(client)})
        _sign_in(client, "tom")
        r = client.post("/_dash-update-component", json=body | {"state": [
            {"id": "app-user", "property": "data", "value": "olga"}]})  # someone else's name put in
        assert r.status_code == 403 and "own name" in r.get_data(as_text=True)
        refused = _audit(people)
        refused = refused[refused["action"] == "auth.refused"]
        assert list(refused["person"]) == ["anonymous", "vera", "tom"]
    finally:
        auth.WRITE_ROLES.pop("test-write-target", None)


def test_a_trusted_header_signs_in_only_from_the_trusted_proxy(people, tmp_path):
    client = _app(people, tmp_path, trusted_header="X-Remote-User",
                  trusted_proxies=("10.0.0.2",)).server.test_client()
    proxy = {"REMOTE_ADDR": "10.0.0.2"}
    assert client.get("/", headers={"X-Remote-User": "tom"}, environ_base=proxy).status_code == 200
    other = _app(people, tmp_path / "b", trusted_header="X-Remote-User",
                 trusted_proxies=("10.0.0.2",)).server.test_client()
    # from anywhere else the header is ignored
    assert other.get("/", headers={"X-Remote-User": "tom"},
                     environ_base={"REMOTE_ADDR": "10.0.0.66"}).status_code == 302
    r = other.get("/", headers={"X-Remote-User": "mallory"}, environ_base=proxy)
    assert r.status_code == 403 and "no active account" in r.get_data(as_text=True)


def test_the_audit_trail_is_read_only_by_method_owners_even_with_open_reading(people, tmp_path):
    client = _app(people, tmp_path, open_reading=True).server.test_client()
    body = {"output": "audit-table.children", "outputs": {"id": "audit-table", "property": "children"},
            "inputs": [{"id": "audit-person", "property": "value", "value": None}],
            "state": [{"id": "app-user", "property": "data", "value": None}]}
    assert client.post("/_dash-update-component", json=body).status_code == 403
    _sign_in(client, "tom")
    r = client.post("/_dash-update-component", json=body | {"state": [
        {"id": "app-user", "property": "data", "value": "tom"}]})
    assert r.status_code == 403 and "role technician does not include method_owner" in r.get_data(as_text=True)
