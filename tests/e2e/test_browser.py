"""The dashboard in a real browser: every view opens without console errors, a flagged point on Lots opens its
Actuation view, the audio element's source answers Range requests with playable WAV, deep links reproduce the
selections, meeting mode switches the look."""

from __future__ import annotations

import io
import re

import pytest
import soundfile as sf

from tests.e2e.conftest import PASSWORD, sign_in

VIEWS = [("today", "/"), ("lots", "/lots"), ("trajectories", "/trajectories"), ("rigs", "/rigs"),
         ("references", "/references"), ("about", "/about"), ("actuation", "/actuation/104")]


def _settle(page):
    page.wait_for_selector("#app-page h1")
    page.wait_for_load_state("networkidle")
    # Dash marks pending callbacks on the document title / loading states: wait until no graph is loading.
    page.wait_for_function("() => !document.querySelector('[data-dash-is-loading=\"true\"]')")


@pytest.mark.parametrize("name,path", VIEWS)
def test_every_view_opens_without_console_errors(page, server, artifacts, name, path):
    page.goto(server + path)
    _settle(page)
    if name in ("lots", "rigs", "trajectories", "actuation"):
        page.wait_for_selector(".js-plotly-plot .main-svg")
    page.wait_for_timeout(500)
    page.screenshot(path=str(artifacts / f"{name}.png"), full_page=True)
    assert page.errors == []
    assert "Harken" in page.title()


FLAGGED_POINT_JS = """
() => {
  const gd = document.querySelector('#lots-chart .js-plotly-plot') || document.getElementById('lots-chart');
  const data = gd._fullData, xa = gd._fullLayout.xaxis, ya = gd._fullLayout.yaxis;
  const box = gd.querySelector('.nsewdrag').getBoundingClientRect();
  const px = (t, i) => [box.left + xa.c2p(t.x[i]), box.top + ya.c2p(t.y[i])];
  const f = data.find(t => t.name === 'flagged actuations');  // the first rig's (one trace per rig)
  const others = [];
  data.forEach(t => { if (t !== f && t.visible !== false && t.x && t.mode !== 'lines+text') {
      for (let i = 0; i < t.x.length; i++) others.push(px(t, i)); } });
  let best = null;
  for (let i = 0; i < f.x.length; i++) {
    const p = px(f, i);
    let d = 1e9;
    others.forEach(o => { d = Math.min(d, Math.hypot(o[0] - p[0], o[1] - p[1])); });
    if (best === null || d > best.d) best = {x: p[0], y: p[1], d: d, id: Math.round(f.customdata[i])};
  }
  return best;
}
"""


def test_click_on_a_flagged_point_opens_its_actuation(page, server):
    page.goto(server + "/lots")
    _settle(page)
    page.wait_for_selector("#lots-chart .main-svg")
    page.wait_for_timeout(800)
    target = page.evaluate(FLAGGED_POINT_JS)
    assert target is not None and target["d"] > 3
    page.mouse.move(target["x"], target["y"])
    page.wait_for_timeout(300)
    page.mouse.click(target["x"], target["y"])
    page.wait_for_url(re.compile(r"/actuation/\d+"))
    page.wait_for_selector("#app-page h1:has-text('Actuation')")
    _settle(page)
    assert page.locator("#app-page h1").inner_text() == f"Actuation {int(target['id'])}"
    assert page.errors == []


def test_audio_source_answers_range_with_playable_wav(page, server):
    page.goto(server + "/actuation/104")
    _settle(page)
    src = page.eval_on_selector("#actuation-audio-this", "a => a.src")
    assert re.search(r"/audio/104\.wav$", src)
    part = page.request.get(src, headers={"Range": "bytes=0-1023"})
    assert part.status == 206
    assert part.headers["content-range"].startswith("bytes 0-1023/")
    body = part.body()
    assert len(body) == 1024 and body[:4] == b"RIFF" and body[8:12] == b"WAVE"
    whole = page.request.get(src).body()
    x, fs = sf.read(io.BytesIO(whole))
    assert fs == 48_000 and x.size > 0.5 * fs  # the demo records 1.2 s at 48 kHz (small.toml)
    # Chromium itself reads the WAV (metadata and duration) and the player starts at a low volume.
    info = page.evaluate("""() => new Promise(resolve => {
        const a = document.getElementById('actuation-audio-this');
        const done = () => resolve({duration: a.duration, volume: a.volume, error: a.error && a.error.code});
        if (a.readyState >= 1) { done(); } else { a.addEventListener('loadedmetadata', done); a.load(); }
        setTimeout(done, 8000);
    })""")
    assert info["error"] is None
    assert info["duration"] == pytest.approx(x.size / fs, abs=0.01)
    assert info["volume"] == pytest.approx(0.2)
    assert page.errors == []


def test_today_lists_signals_and_lots_lists_a_lot_s_units(page, server):
    page.goto(server + "/")
    _settle(page)
    page.wait_for_selector("#today-signals li")
    first = page.locator("#today-signals li").first.inner_text()
    assert "Suggested cause:" in first and "Next:" in first
    assert page.locator("#today-signals li", has_text="L2604").count() >= 1  # the small scenario's coarse lot
    page.goto(server + "/lots?event=dose_release&lot=L2604%7CNF-R1")
    _settle(page)
    page.wait_for_selector("#lots-units tbody tr")
    assert page.locator("#lots-units tbody tr").count() >= 1
    page.wait_for_selector("#lots-chart .main-svg")
    assert "stored signals" in page.locator("#lots-summary").inner_text().lower()
    assert page.errors == []


def test_deep_link_reproduces_the_selections(page, browser, server):
    page.goto(server + "/lots")
    _settle(page)
    page.check("#lots-rules input[value=nelson]")
    page.check("#lots-group input[value=pooled]")
    page.wait_for_function("() => window.location.search.includes('rules=nelson')")
    page.wait_for_function("() => window.location.search.includes('group=pooled')")
    link = page.url
    other = browser.new_page()
    other.goto(link)
    _settle(other)
    assert other.is_checked("#lots-rules input[value=nelson]")
    assert other.is_checked("#lots-group input[value=pooled]")
    assert other.url == link
    other.close()
    assert page.errors == []


def test_deep_link_into_an_actuation_keeps_event_and_slice(page, server):
    page.goto(server + "/actuation/104?event=dose_release&slice=5")
    _settle(page)
    page.wait_for_selector("#actuation-bands .main-svg")
    assert "slice 5" in page.locator("#actuation-bands").inner_text()
    assert "event=dose_release" in page.url and "slice=5" in page.url
    assert page.locator("#actuation-link").inner_text() == page.url


def test_meeting_mode_from_the_url_and_the_switch(page, server, artifacts):
    page.goto(server + "/lots?meeting=1")
    _settle(page)
    page.wait_for_function("() => document.body.classList.contains('meeting')")
    page.wait_for_selector("#lots-chart .main-svg")
    page.wait_for_timeout(500)
    page.screenshot(path=str(artifacts / "lots-meeting.png"), full_page=True)
    page.uncheck("#app-meeting-switch input")
    page.wait_for_function("() => !document.body.classList.contains('meeting')")
    assert "meeting=1" not in page.url
    assert page.errors == []


def test_reference_build_runs_in_the_background_with_progress(page, writable_server, artifacts):
    # reading without signing in shows no build controls
    page.goto(writable_server + "/references")
    _settle(page)
    page.wait_for_selector("#references-who:has-text('Sign in as a method owner')")
    assert page.locator("#references-build").count() == 0
    sign_in(page, writable_server, "ada", next_path="/references")
    _settle(page)
    page.wait_for_selector("#app-user-name:has-text('Ada Tester (method owner)')")
    page.wait_for_selector("#references-who:has-text('recorded under ada')")
    page.uncheck("#references-events input[value=dose_release]")
    page.click("#references-build")
    page.wait_for_selector("#references-status:has-text('Built:')", timeout=120_000)
    page.screenshot(path=str(artifacts / "references-built.png"), full_page=True)
    rows = page.locator("#references-table tbody tr")
    texts = [rows.nth(i).inner_text() for i in range(rows.count())]
    assert any("metering_click" in t and "pending" in t and "awaiting approval" in t for t in texts)
    assert page.eval_on_selector("#references-progress", "p => p.value") == 1
    # the signed approval: a wrong password is refused, the right one activates the version
    page.reload()
    _settle(page)
    page.fill("#references-approve-reason", "reference lots reviewed at the method meeting")
    page.fill("#references-approve-password", "not the password")
    page.click("#references-approve-submit")
    page.wait_for_selector("#references-approve-status:has-text('Not approved')")
    page.fill("#references-approve-password", PASSWORD)
    page.click("#references-approve-submit")
    page.wait_for_selector("#references-approve-status:has-text('approved by ada')")
    rows = page.locator("#references-table tbody tr")
    texts = [rows.nth(i).inner_text() for i in range(rows.count())]
    assert any("metering_click" in t and "active" in t and "ada" in t and "approved for routine monitoring" in t
               for t in texts)
    assert any("metering_click" in t and "retired" in t for t in texts)
    assert page.eval_on_selector("#references-approve-password", "e => e.value") == ""
    assert page.errors == []
