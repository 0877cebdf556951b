"""Signed approvals of reference models: a build waits, a method owner re-enters the password, gives the meaning
and a reason, and only then is the version active (analysis.store, `harken reference approve`)."""

from __future__ import annotations

import io

import pytest

from analysis.references import build_reference
from analysis.store import Store, StoreError
from analysis.store import audit as chain
from tests.analysis.conftest import run_cli
from tests.conftest import add_people

PASSWORD = "approver's long password"
MEANING = "approved for routine monitoring"


@pytest.fixture
def people(store_copy):
    return add_people(store_copy, [("vera", "viewer"), ("olga", "method_owner"), ("otto", "method_owner")],
                      password=PASSWORD)


def _pending(store, by="olga"):
    (made,) = build_reference(store, "demo-dpi", ["metering_click"], ["L2601", "L2602", "L2603"], created_by=by,
                              activate=False)
    return made.model_id


def test_a_pending_version_becomes_active_only_by_a_signed_approval(people):
    with Store.open(people, create=False) as store:
        before = store.models(event="metering_click")
        old = int(before.loc[before["status"] == "active", "id"].iloc[0])
        mid = _pending(store)
        models = store.models(event="metering_click").set_index("id")
        assert models.at[mid, "status"] == "pending" and models.at[old, "status"] == "active"
        with pytest.raises(StoreError, match="needs olga's own password"):
            store.approve_model(mid, person="olga", password="wrong password!", meaning=MEANING, reason="ok")
        with pytest.raises(StoreError, match="needs an active method owner; vera is viewer"):
            store.approve_model(mid, person="vera", password=PASSWORD, meaning=MEANING, reason="ok")
        with pytest.raises(StoreError, match="meaning is one of"):
            store.approve_model(mid, person="olga", password=PASSWORD, meaning="fine", reason="ok")
        with pytest.raises(StoreError, match="needs a reason"):
            store.approve_model(mid, person="olga", password=PASSWORD, meaning=MEANING, reason="  ")
        assert store.models(event="metering_click").set_index("id").at[mid, "status"] == "pending"
        store.approve_model(mid, person="olga", password=PASSWORD, meaning=MEANING, reason="lots L2601-03 reviewed")
        models = store.models(event="metering_click").set_index("id")
        assert models.at[mid, "status"] == "active" and models.at[old, "status"] == "retired"
        with pytest.raises(StoreError, match="is active, not awaiting approval"):
            store.approve_model(mid, person="olga", password=PASSWORD, meaning=MEANING, reason="again")
        with store.read() as conn:
            from analysis.store import queries
            signed = queries.approvals(conn)
            assert chain.verify(conn)[1] is None
        log = store.audit_log()
    assert list(zip(signed["model_id"], signed["person"], signed["meaning"])) == [(mid, "olga", MEANING)]
    assert signed["at"].notna().all() and signed["reason"].iloc[0] == "lots L2601-03 reviewed"
    approve = log[log["action"] == "reference.approve"]
    assert list(approve["person"]) == ["olga"] and MEANING in approve["detail"].iloc[0]
    assert (log["action"] == "reference.approve_refused").sum() == 1  # the wrong password, kept


def test_a_site_may_require_the_approver_not_to_be_the_builder(people):
    with Store.open(people, create=False) as store:
        store.set_policy("policy.approver_not_builder", "true", person="admin")
        mid = _pending(store, by="olga")
        with pytest.raises(StoreError, match="approver is not the person who built the version"):
            store.approve_model(mid, person="olga", password=PASSWORD, meaning=MEANING, reason="mine")
        store.approve_model(mid, person="otto", password=PASSWORD, meaning=MEANING, reason="checked olga's build")
        assert store.models(event="metering_click").set_index("id").at[mid, "status"] == "active"


def test_the_command_line_builds_pending_versions_and_approves_them_in_a_store_with_users(people, monkeypatch):
    args = ("reference", "build", "--profile", "demo-dpi", "--event", "metering_click", "--lots", "L2601,L2602",
            "--store", people)
    code, _, err = run_cli(*args, "--by", "somebody")
    assert code == 1 and "give --by an active method owner of the store ('somebody' is not one)" in err
    code, out, err = run_cli(*args, "--by", "olga")
    assert code == 0, err
    mid = int(out.split("model ")[-1].split()[0])
    assert "awaits approval" in out
    code, _, err = run_cli("reference", "activate", "--model", str(mid), "--store", people)
    assert code == 1 and "by a signed approval" in err
    monkeypatch.setattr("sys.stdin", io.StringIO(PASSWORD + "\n"))
    code, out, err = run_cli("reference", "approve", "--model", str(mid), "--by", "olga", "--meaning", MEANING,
                             "--reason", "built from two lots for a trial", "--password-stdin", "--store", people)
    assert code == 0, err
    assert "approved by olga" in out
    with Store.open(people, create=False) as store:
        assert store.models(event="metering_click").set_index("id").at[mid, "status"] == "active"
    code, _, err = run_cli("reference", "policy", "--approver-not-builder", "yes", "--store", people)
    assert code == 0, err
