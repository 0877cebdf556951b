"""People and roles in the store (analysis.store.users) and `harken user`."""

from __future__ import annotations

import io

import pytest
from argon2 import PasswordHasher
from argon2.exceptions import VerifyMismatchError

from analysis.store import Store, StoreError
from analysis.store import audit as chain
from analysis.store.users import ROLES, add_user, check_password, get_user, role_at_least
from tests.analysis.conftest import run_cli

SECRET = "correct horse battery"


def _cli(monkeypatch, *argv, stdin=""):
    monkeypatch.setattr("sys.stdin", io.StringIO(stdin))
    return run_cli(*argv)


def test_users_are_added_listed_changed_and_disabled_from_the_command_line(store_url, tmp_path, monkeypatch):
    Store.open(store_url, files_dir=tmp_path).close()
    code, out, err = _cli(monkeypatch, "user", "add", "ana.k", "--role", "technician", "--full-name", "Ana K",
                          "--password-stdin", "--store", store_url, stdin=SECRET + "\n")
    assert code == 0, err
    assert "added as technician" in out
    assert _cli(monkeypatch, "user", "add", "sso-only", "--role", "viewer", "--no-password", "--store",
                store_url)[0] == 0
    assert _cli(monkeypatch, "user", "set-role", "ana.k", "method_owner", "--store", store_url)[0] == 0
    assert _cli(monkeypatch, "user", "disable", "sso-only", "--store", store_url)[0] == 0
    code, out, _ = _cli(monkeypatch, "user", "list", "--store", store_url)
    assert code == 0
    lines = out.strip().splitlines()
    assert lines[0].split()[:3] == ["ana.k", "method_owner", "active"] and lines[0].endswith("Ana K")
    assert lines[1].split()[:3] == ["sso-only", "viewer", "disabled"]
    with Store.open(store_url, files_dir=tmp_path) as store, store.read() as conn:
        hashed = conn.exec_driver_sql("SELECT password_hash FROM users WHERE user_name = 'ana.k'").scalar()
        trail = store.audit_log()
        assert chain.verify(conn)[1] is None
    # Argon2id, checked with the library's own verifier; the clear password is nowhere in the store's audit
    assert hashed.startswith("$argon2id$") and PasswordHasher().verify(hashed, SECRET)
    with pytest.raises(VerifyMismatchError):
        PasswordHasher().verify(hashed, SECRET + "x")
    assert list(trail["action"]) == ["user.add", "user.add", "user.set_role", "user.disable"]
    assert not trail["detail"].str.contains(SECRET).any() and not trail["detail"].str.contains("argon2").any()
    assert trail["person"].str.endswith("(command line)").all()


def test_passwords_are_checked_and_a_disabled_user_cannot_sign_in(sqlite_url, tmp_path):
    with Store.open(sqlite_url, files_dir=tmp_path) as store:
        with store.write() as conn:
            add_user(conn, "tech1", role="technician", password=SECRET, by="admin")
            add_user(conn, "nopass", role="viewer", password=None, by="admin")
        with store.read() as conn:
            assert check_password(conn, "tech1", SECRET).role == "technician"
            assert check_password(conn, "tech1", "wrong password") is None
            assert check_password(conn, "nobody", SECRET) is None
            assert check_password(conn, "nopass", "") is None
        with store.write() as conn:
            from analysis.store.users import disable_user
            disable_user(conn, "tech1", by="admin")
        with store.read() as conn:
            assert check_password(conn, "tech1", SECRET) is None
            assert get_user(conn, "tech1").state == "disabled"  # kept, never deleted


@pytest.mark.parametrize("name,role,password,match", [
    ("Ana", "viewer", SECRET, "a user name is 2-64 characters"),
    ("x", "viewer", SECRET, "a user name is 2-64 characters"),
    ("ana", "boss", SECRET, "role must be one of viewer, technician, method_owner, admin; got 'boss'"),
    ("ana", "viewer", "short", "a password needs at least 10 characters"),
])
def test_bad_users_are_refused_with_the_reason(sqlite_url, tmp_path, name, role, password, match):
    with Store.open(sqlite_url, files_dir=tmp_path) as store, pytest.raises(StoreError, match=match):
        with store.write() as conn:
            add_user(conn, name, role=role, password=password, by="admin")


def test_a_user_name_is_unique_and_the_cli_says_so(sqlite_url, tmp_path, monkeypatch):
    Store.open(sqlite_url, files_dir=tmp_path).close()
    args = ("user", "add", "dup", "--role", "viewer", "--password-stdin", "--store", sqlite_url)
    assert _cli(monkeypatch, *args, stdin=SECRET + "\n")[0] == 0
    code, _, err = _cli(monkeypatch, *args, stdin=SECRET + "\n")
    assert code == 1 and "user 'dup' exists already" in err
    code, _, err = _cli(monkeypatch, "user", "set-role", "ghost", "admin", "--store", sqlite_url)
    assert code == 1 and "no user 'ghost'" in err
    code, _, err = _cli(monkeypatch, "user", "add", "other", "--role", "viewer", "--store", sqlite_url)
    assert code == 1 and "use --password-stdin" in err  # no terminal to ask on


def test_each_role_includes_the_ones_before_it():
    assert ROLES == ("viewer", "technician", "method_owner", "admin")
    for i, have in enumerate(ROLES):
        for j, need in enumerate(ROLES):
            assert role_at_least(have, need) == (i >= j)
    assert not role_at_least("intruder", "viewer")
