"""Sign-in, roles and the review of signals in Chromium (dashboard.auth, dashboard.review) on a private store with a
viewer (vic), a technician (tom) and a method owner (ada)."""

from __future__ import annotations

import pandas as pd

from tests.e2e.conftest import sign_in


def _settle(page):
    page.wait_for_load_state("networkidle")


def test_signing_in_and_out(page, writable_server):
    sign_in(page, writable_server, "tom")
    _settle(page)
    page.wait_for_selector("#app-user-name:has-text('Tom Tech (technician)')")
    page.click("#app-signout")
    page.wait_for_selector("#signin-form")
    assert "/signin" in page.url
    page.goto(writable_server + "/")
    _settle(page)
    page.wait_for_selector("#app-signin")  # reading is open on this server, but nobody is signed in
    assert page.errors == []


def test_a_viewer_sees_no_write_controls_and_a_replayed_write_is_refused(page, writable_server):
    sign_in(page, writable_server, "vic")
    _settle(page)
    page.wait_for_selector("#today-review-who:has-text('needs the technician')")
    assert page.locator("#today-review-submit").count() == 0
    page.goto(writable_server + "/references")
    _settle(page)
    assert page.locator("#references-build").count() == 0
    # the write callback's request, sent with the viewer's own session cookie, as a crafted client would
    body = {"output": "today-review-status.children",
            "outputs": {"id": "today-review-status", "property": "children"},
            "inputs": [{"id": "today-review-submit", "property": "n_clicks", "value": 1}],
            "state": [{"id": "today-review-target", "property": "value", "value": 1},
                      {"id": "today-review-verdict", "property": "value", "value": "unit"},
                      {"id": "today-review-comment", "property": "value", "value": ""},
                      {"id": "app-user", "property": "data", "value": "vic"}],
            "changedPropIds": ["today-review-submit.n_clicks"]}
    r = page.request.post(writable_server + "/_dash-update-component", data=body)
    assert r.status == 403 and "role viewer does not include technician" in r.text()


def test_a_technician_records_a_verdict_that_shows_on_today_in_the_export_and_the_audit(page, writable_server,
                                                                                      store_copy):
    from analysis.store import Store
    from analysis.store import audit as chain

    sign_in(page, writable_server, "tom")
    _settle(page)
    page.wait_for_selector("#today-review-submit")
    title = page.locator("#today-review-title").inner_text()
    waiting = int(title.split("(")[1].split()[0])
    assert waiting >= 1
    target = page.eval_on_selector("#today-review-target", "e => e.textContent")
    assert "awaiting" in target
    # "no fault found" without a comment is refused with the reason
    page.click("#today-review-verdict input[value='no fault found']")
    page.click("#today-review-submit")
    page.wait_for_selector("#today-review-status:has-text('needs a comment')")
    page.fill("#today-review-comment", "<b>listened</b> & compared: <script>alert(1)</script> no fault")
    page.click("#today-review-submit")
    page.wait_for_selector("#today-review-status:has-text('Recorded: no fault found, by tom')")
    page.reload()
    _settle(page)
    page.wait_for_selector("#today-reviewed tbody tr")
    row = page.locator("#today-reviewed tbody tr").first.inner_text()
    assert "no fault found" in row and "tom" in row
    # the comment's HTML is shown as text, not made into elements
    assert "<b>listened</b>" in row and page.locator("#today-reviewed b").count() == 0
    assert int(page.locator("#today-review-title").inner_text().split("(")[1].split()[0]) == waiting - 1
    assert page.errors == []
    with Store.open(store_copy, create=False) as store:
        sig = store.signals(reviews=True)
        done = sig[sig["reviews"] > 0]
        exported = store.export_actuations()
        log = store.audit_log()
        with store.read() as conn:
            assert chain.verify(conn)[1] is None
    assert len(done) == 1 and done.iloc[0]["verdict"] == "no fault found" and done.iloc[0]["verdict_by"] == "tom"
    # the actuation export carries it exactly for the actuation(s) the reviewed signal is about
    with_verdict = set(exported.loc[exported["verdict"] != "", "actuation_id"])
    assert with_verdict == ({int(done.iloc[0]["actuation_id"])} if done.iloc[0]["level"] == "actuation" else set())
    review = log[log["action"] == "review.add"]
    assert list(review["person"]) == ["tom"] and "listened" in review["detail"].iloc[0]
    at = pd.Timestamp(done.iloc[0]["verdict_at"])  # stored in UTC, moments ago
    assert abs(pd.Timestamp.now(tz="UTC").tz_localize(None) - at) < pd.Timedelta(minutes=10)


def test_five_wrong_passwords_lock_the_account(page, writable_server):
    for _ in range(5):
        sign_in(page, writable_server, "ada", password="not her password at all")
        page.wait_for_selector("#signin-error:has-text('wrong password')")
    sign_in(page, writable_server, "ada")  # the right one, too late
    page.wait_for_selector("#signin-error:has-text('Too many failed sign-ins for ada')")
    page.goto(writable_server + "/references")  # and nobody is signed in
    _settle(page)
    page.wait_for_selector("#app-signin")
    assert page.locator("#app-user-name").count() == 0


def test_the_audit_view_is_for_method_owners_and_filters_the_trail(page, writable_server):
    sign_in(page, writable_server, "tom")
    _settle(page)
    assert page.locator("#app-nav-audit").count() == 0  # not in a technician's menu
    page.goto(writable_server + "/audit")
    _settle(page)
    page.wait_for_selector("#audit-who:has-text('method owners and admins')")
    page.click("#app-signout")
    sign_in(page, writable_server, "ada", next_path="/audit")
    _settle(page)
    page.wait_for_selector("#app-nav-audit")
    page.wait_for_selector("#audit-rows tbody tr")
    texts = page.locator("#audit-rows tbody tr").all_inner_texts()
    assert any("auth.signin" in t and "ada" in t for t in texts) and any("user.add" in t for t in texts)
    page.click("#audit-action")
    page.click("text=auth.")
    page.wait_for_function("() => [...document.querySelectorAll('#audit-rows tbody tr')].every("
                           "r => r.innerText.includes('auth.'))")
    assert page.errors == []


def test_a_technician_reviews_a_flag_on_the_actuation_view(page, writable_server, store_copy):
    from analysis.store import Store

    with Store.open(store_copy, create=False) as store:
        acts = store.signals(levels=("actuation",))
    aid = int(acts["actuation_id"].iloc[0])
    sign_in(page, writable_server, "tom", next_path=f"/actuation/{aid}")
    _settle(page)
    page.wait_for_selector("#actuation-review-submit")
    assert "awaiting" in page.eval_on_selector("#actuation-review-target", "e => e.textContent")
    page.click("#actuation-review-verdict input[value='recording']")
    page.click("#actuation-review-submit")
    page.wait_for_selector("#actuation-review-status:has-text('Recorded: recording problem, by tom')")
    page.reload()
    _settle(page)
    page.wait_for_selector("#actuation-reviewed tbody tr")
    assert "recording problem" in page.locator("#actuation-reviewed tbody tr").first.inner_text()
    with Store.open(store_copy, create=False) as store:
        exported = store.export_actuations()
    assert "recording problem (tom" in exported.loc[exported["actuation_id"] == aid, "verdict"].iloc[0]
    assert page.errors == []
