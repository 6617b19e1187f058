"""The planner page in a real browser: Debian's chromium, headless, driven by Debian's
chromedriver through python3-selenium, against the real binary on a loopback port with a seeded
invented feed (`forewarden simulate`). Every test fails on any browser console error (a refused
inline style or script under the page's Content-Security-Policy shows up there too).

Screenshots of each view at 1280x800 (and the attention list at 360 px wide) are written to
FOREWARDEN_BUILD_DIR/screenshots/; deploy/screenshots.sh copies two of them for the README.
The time from navigation to the attention list being drawn is printed and written to
screenshots/timing.txt (reported, not asserted: timings are not tests)."""
import os
import subprocess
import sys
import urllib.parse

sys.path.insert(0, os.path.dirname(__file__))
from harness import BINARY, DEADLINE, Server, run, temp_dir, write_people_file  # noqa: E402

from selenium import webdriver  # noqa: E402
from selenium.webdriver.chrome.options import Options  # noqa: E402
from selenium.webdriver.chrome.service import Service  # noqa: E402
from selenium.common.exceptions import NoSuchElementException, StaleElementReferenceException  # noqa: E402
from selenium.webdriver.common.action_chains import ActionChains  # noqa: E402
from selenium.webdriver.common.by import By  # noqa: E402
from selenium.webdriver.common.keys import Keys  # noqa: E402
from selenium.webdriver.support.ui import WebDriverWait  # noqa: E402

SETTINGS = """
alerts: {sinks: [{name: log, type: log}]}
policies:
  - name: shop-weekly
    match: "*"
    period: week
    method: ses
    alpha: 0.15
    start: {mean_of_first: 8}
    warmup: 12
    rules:
      - {name: shift, signal: cusum, periods: 4, limit: 6, clear: 3, resolve_after: 3,
         escalate_limit: 12, escalate_severity: critical}
      - {name: drift, signal: trigg, limit: 0.6, clear: 0.4, resolve_after: 3}
"""
HOSTILE = '<img src=x onerror="window.__pwned=1">'
OPERATOR = "olga-token-0123456789abcdef"  # the feed's token in the tests with people
SHOTS = os.path.join(os.environ.get("FOREWARDEN_BUILD_DIR", temp_dir()), "screenshots")


def feed(d, series=120, periods=104, seed=20261202, start="2024-01-01"):
    """An invented feed from the service's own simulator; returns its CSV text."""
    path = os.path.join(d, "feed.csv")
    subprocess.run([BINARY, "simulate", "--series", str(series), "--periods", str(periods), "--seed", str(seed),
                    "--start", start, "--output", path, "--truth", os.path.join(d, "truth.csv")],
                   check=True, capture_output=True, timeout=DEADLINE)
    with open(path) as f:
        return f.read()


def service(settings=SETTINGS, extra_rows=""):
    d = temp_dir()
    srv = Server(settings.replace("PEOPLE", os.path.join(d, "people")), workdir=d)
    return d, srv


def load(srv, text, token=None):
    status, answer, _ = srv.request("POST", "/v1/actuals", text, "text/csv", token=token)
    assert status == 200, answer
    return answer


class Browser:
    """Headless chromium at 1280x800 with its console log collected."""

    def __init__(self, width=1280, height=800):
        o = Options()
        o.binary_location = "/usr/bin/chromium"
        self.profile = temp_dir()
        for a in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                  "--window-size=%d,%d" % (width, height), "--user-data-dir=" + self.profile,
                  "--no-first-run", "--disable-extensions", "--disable-background-networking"):
            o.add_argument(a)
        o.set_capability("goog:loggingPrefs", {"browser": "ALL"})
        self.d = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=o)
        self.d.set_page_load_timeout(DEADLINE)
        if width < 500:  # below the smallest window chromium draws: a phone-sized viewport
            self.d.execute_cdp_cmd("Emulation.setDeviceMetricsOverride",
                                   {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": True})
        self.console = []

    def open(self, url, ready):
        self.d.get(url)
        return self.wait_ready(ready)

    def wait_ready(self, ready):
        WebDriverWait(self.d, DEADLINE, poll_frequency=0.05,
                      ignored_exceptions=(StaleElementReferenceException,)).until(
            lambda d: d.find_element(By.ID, "main").get_attribute("data-ready") == ready)

    def wait(self, condition, what, seen=None):
        try:
            # an element found while the view redraws may go stale before it is read: try again
            return WebDriverWait(self.d, DEADLINE, poll_frequency=0.05,
                                 ignored_exceptions=(StaleElementReferenceException,
                                                     NoSuchElementException)).until(
                lambda d: condition(d))
        except Exception:
            raise AssertionError("waited for: " + what + ("; seen: " + seen() if seen else ""))

    def css(self, selector):
        return self.d.find_elements(By.CSS_SELECTOR, selector)

    def one(self, selector):
        return self.d.find_element(By.CSS_SELECTOR, selector)

    def js(self, script, *args):
        return self.d.execute_script(script, *args)

    def shot(self, name):
        os.makedirs(SHOTS, exist_ok=True)
        self.d.save_screenshot(os.path.join(SHOTS, name + ".png"))

    def errors(self):
        self.console += self.d.get_log("browser")
        return [e for e in self.console if e.get("level") == "SEVERE"]

    def close(self, expect_errors=()):
        try:
            errors = [e for e in self.errors() if not any(x in e["message"] for x in expect_errors)]
            assert not errors, "browser console errors: %s" % errors
        finally:
            self.d.quit()


# Every visible text element's colour against the first opaque background behind it, by the
# WCAG 2.1 relative-luminance formula; returns those under 4.5:1.
CONTRAST_SCRIPT = """
const lum = (c) => {
  const [r, g, b] = c.map((v) => { v /= 255; return v <= 0.03928 ? v / 12.92 : Math.pow((v + 0.055) / 1.055, 2.4); });
  return 0.2126 * r + 0.7152 * g + 0.0722 * b;
};
const rgba = (text) => (text.match(/[\\d.]+/g) || []).map(Number);
const background = (e) => {
  for (; e; e = e.parentElement) {
    const c = rgba(getComputedStyle(e).backgroundColor);
    if (c.length >= 3 && (c.length < 4 || c[3] > 0.9)) return c.slice(0, 3);
  }
  return [255, 255, 255];
};
const low = [];
for (const e of document.querySelectorAll('body *')) {
  if (!e.offsetParent || ![...e.childNodes].some((n) => n.nodeType === 3 && n.textContent.trim())) continue;
  if (e.closest('canvas, .dygraph-axis-label')) continue;
  const fg = rgba(getComputedStyle(e).color).slice(0, 3);
  const bg = background(e);
  const [a, b] = [lum(fg), lum(bg)].sort((x, y) => y - x);
  const ratio = (a + 0.05) / (b + 0.05);
  if (ratio < 4.5) low.push(e.tagName + '.' + e.className + ' ' + ratio.toFixed(2) + ' ' + e.textContent.trim().slice(0, 30));
}
return low;
"""


def gone(element):
    """Whether a found element has left the page (its view was drawn again)."""
    try:
        element.is_enabled()
        return False
    except StaleElementReferenceException:
        return True


def series_path(key):
    return urllib.parse.quote(key, safe="")


def test_attention_list_matches_the_api_and_the_keyboard_opens_a_series():
    d, srv = service()
    b = Browser()
    try:
        load(srv, feed(d))
        status, api, _ = srv.request("GET", "/v1/attention?limit=50")
        assert status == 200 and api["total"] > 3, api
        b.open(srv.url + "/", "attention")
        keys = [tr.get_attribute("data-key") for tr in b.css("#attention tbody tr")]
        assert keys == [r["key"] for r in api["rows"]], (keys, [r["key"] for r in api["rows"]])
        # every series the API lists as alerting is in the list's open or acknowledged part
        status, alerting, _ = srv.request("GET", "/v1/series?status=alerting&limit=1000")
        listed = set()
        offset = 0
        while True:
            _, page, _ = srv.request("GET", "/v1/attention?state=unresolved&limit=500&offset=%d" % offset)
            listed |= {r["key"] for r in page["rows"]}
            offset += 500
            if offset >= page["total"]:
                break
        assert {s["key"] for s in alerting["series"]} <= listed, "alerting series missing from the list"
        groups = [tr.get_attribute("data-group") for tr in b.css("#attention tbody tr")]
        order = {"open": 0, "acknowledged": 1, "near": 2}
        assert groups == sorted(groups, key=order.get), groups
        # counts per policy as the API gives them
        counts = {c.get_attribute("data-count"): c.text for c in b.css("#counts tbody td")}
        assert counts["open"].replace(",", "") == str(api["counts"][0]["open"]), counts
        # sparklines: one per row, 26 points each where the series has them
        spark = b.css("#attention tbody tr .spark")[0]
        assert spark.get_attribute("data-points") == str(len(api["rows"][0]["recent_actual"]))
        # the filter lives in the URL; a shared URL shows the same view
        b.one("#f-state").send_keys("Open alerts")
        b.one("#f-apply").click()
        b.wait(lambda dr: "state=open" in dr.current_url, "state=open in the URL")
        b.wait_ready("attention")
        _, open_api, _ = srv.request("GET", "/v1/attention?state=open&limit=50")
        b.wait(lambda dr: [tr.get_attribute("data-key") for tr in b.css("#attention tbody tr")]
               == [r["key"] for r in open_api["rows"]], "the open-only rows")
        b.open(srv.url + "/#/?state=open", "attention")
        assert [tr.get_attribute("data-key") for tr in b.css("#attention tbody tr")] == [r["key"] for r in open_api["rows"]]
        # keyboard: j j k j then Enter opens the second row; arrow keys too
        body = b.one("body")
        body.send_keys("j")
        body.send_keys("j")
        body.send_keys("k")
        body.send_keys(Keys.ARROW_DOWN)
        current = b.one("#attention tbody tr.current").get_attribute("data-key")
        assert current == open_api["rows"][1]["key"], current
        b.d.switch_to.active_element.send_keys(Keys.ENTER)
        b.wait_ready("series")
        assert b.one("#series-key").text == current
        assert b.d.current_url.endswith("#/series/" + series_path(current))
    finally:
        try:
            b.close()
        finally:
            srv.stop()


def test_series_view_shows_both_charts_the_table_and_its_actions_change_the_api():
    d, srv = service()
    b = Browser()
    try:
        load(srv, feed(d))
        _, api, _ = srv.request("GET", "/v1/attention?state=open&limit=5")
        key = api["rows"][0]["key"]
        _, history, _ = srv.request("GET", "/v1/series/%s/history" % series_path(key))
        rows = len(history["rows"])
        _, detail_before, _ = srv.request("GET", "/v1/series/%s" % series_path(key))
        b.open(srv.url + "/#/series/" + series_path(key), "series")
        assert b.one("#series-key").text == key
        # both charts with the right number of points, read from the chart library
        assert b.one("#chart-main").get_attribute("data-points") == str(rows)
        _, ahead, _ = srv.request("GET", "/v1/series/%s/forecast?horizon=13" % series_path(key))
        assert len(ahead["rows"]) == 13 and ahead["rows"][0]["forecast"] == detail_before["forecast"]
        assert b.js("return window.forewardenCharts.main.numRows()") == rows + 13  # + 13 ahead
        assert b.js("return window.forewardenCharts.signals.numRows()") == rows
        assert b.js("return window.forewardenCharts.main.getLabels()") == ["period", "actual", "forecast"]
        assert len(b.css("#rows tbody tr")) == rows
        # the hover read-out tells the row under the pointer
        chart = b.one("#chart-main")
        x = b.js("var g = window.forewardenCharts.main; return g.toDomXCoord(g.getValue(3, 0));")
        ActionChains(b.d).move_to_element_with_offset(chart, int(x - chart.size["width"] / 2), 0).perform()
        b.wait(lambda dr: history["rows"][3]["period"] in b.one("#readout").text, "the read-out of row 3")
        b.shot("series")
        _, detail, _ = srv.request("GET", "/v1/series/%s" % series_path(key))
        alerts = [a for a in api["rows"][0]["alerts"] if a["state"] == "open"]
        # each alert's diagnosis as the API gives it, and a reset to the level since the change
        _, first_detail, _ = srv.request("GET", "/v1/alerts/%d" % alerts[0]["id"])
        diagnosis = first_detail["diagnosis"]
        assert diagnosis, first_detail
        texts = [p.text for p in b.css("#alert-history .diagnosis")]
        assert any(diagnosis["change_began"] in t and diagnosis["advice"] in t for t in texts), texts
        b.one("#reset-to-change").click()
        shown = "{:,.3f}".format(diagnosis["level"]).rstrip("0").rstrip(".")  # the page's fmt(v, 3)
        assert "The level becomes " + shown + " " in b.one("#reset-preview").text, (shown, b.one("#reset-preview").text)
        first = alerts[0]["id"]

        def act(action, alert, fill):
            b.one("#act-%s-%d" % (action, alert)).click()
            prefix = "#a%d-%s" % (alert, {"ack": "acknowledge"}.get(action, action))
            b.one(prefix + "-who").send_keys("Dana")
            for suffix, text in fill.items():
                b.one(prefix + suffix).send_keys(text)
            preview = b.one("#main form.action-form .preview").text
            assert str(alert) in preview, preview
            before = b.css("#flash")
            b.one(prefix + "-send").click()
            if before:  # the view reloads: wait for the old answer to go first
                b.wait(lambda dr: gone(before[0]), "the view to reload")
            b.wait_ready("series")
            b.wait(lambda dr: b.css("#flash"), "the server's answer")
            return b.one("#flash").text

        text = act("ack", first, {"-note": "looking at it"})
        assert "acknowledged" in text, text
        _, a, _ = srv.request("GET", "/v1/alerts/%d" % first)
        assert a["state"] == "acknowledged" and a["acknowledged_by"] == "Dana" and a["note"] == "looking at it", a
        text = act("snooze", first, {"-until": "2026-01-05"})
        _, a, _ = srv.request("GET", "/v1/alerts/%d" % first)
        assert a["state"] == "snoozed" and a["snoozed_until_period"] == "2026-01-05", a
        text = act("resolve", first, {})
        _, a, _ = srv.request("GET", "/v1/alerts/%d" % first)
        assert a["state"] == "resolved" and a["resolved_by"] == "Dana", a
        # a server error is shown as it comes: snoozing until a bad period
        remaining = [x for x in alerts[1:]]
        if remaining:
            alert = remaining[0]["id"]
            b.one("#act-snooze-%d" % alert).click()
            b.one("#a%d-snooze-who" % alert).send_keys("Dana")
            b.one("#a%d-snooze-until" % alert).send_keys("not-a-period")
            b.one("#a%d-snooze-send" % alert).click()
            b.wait(lambda dr: b.css(".answer.failed"), "the refusal")
            assert "400" in b.one(".answer.failed").text, b.one(".answer.failed").text
        # reset to the mean of the last 4 actuals: the preview shows the level the server sets
        b.one("#reset-to-mean").click()
        k = b.one("#reset-k")
        k.clear()
        k.send_keys("4")
        b.one("#reset-who").send_keys("Dana")
        b.one("#reset-note").send_keys("promotion ended")
        actuals = [r["actual"] for r in history["rows"] if not r["filled"]][-4:]
        mean = sum(actuals) / len(actuals)
        preview = b.one("#reset-preview").text
        assert ("%.3f" % mean).rstrip("0").rstrip(".") in preview.replace(",", ""), (preview, mean)
        before = b.css("#flash")
        b.one("#reset-send").click()
        if before:
            b.wait(lambda dr: gone(before[0]), "the view to reload")
        b.wait_ready("series")
        b.wait(lambda dr: b.css("#flash"), "the reset's answer")
        _, after, _ = srv.request("GET", "/v1/series/%s" % series_path(key))
        assert abs(after["forecast"] - mean) < 1e-9 * max(1, abs(mean)), (after["forecast"], mean)
        assert after["audit"][0]["who"] == "Dana" and "promotion ended" in after["audit"][0]["detail"], after["audit"]
        assert "Dana" in b.one("#audit").text
        assert detail["forecast"] != after["forecast"]
    finally:
        try:
            b.close(expect_errors=("400 (Bad Request)",))
        finally:
            srv.stop()


def test_a_hostile_key_shows_as_text_and_no_script_runs():
    d, srv = service()
    b = Browser()
    try:
        # a steady series that steps up after 24 weeks, so it alerts and heads the list
        rows = "".join('"%s",2025-W%02d,%d\n' % (HOSTILE.replace('"', '""'), w, v)
                       for w, v in zip(range(1, 33), [10, 11, 9, 10, 12, 8] * 4 + [40] * 8))
        text = "series,period,value\n" + rows
        load(srv, text)
        load(srv, 'series,period,value,note\nplain/a,2025-W01,3,"<b onmouseover=alert(1)>x</b>"\n')
        b.open(srv.url + "/#/?state=unresolved", "attention")
        keys = [a.text for a in b.css("#attention tbody a.key")]
        assert HOSTILE in keys, keys
        assert b.js("return window.__pwned === undefined"), "the key's script ran"
        assert not b.css("#attention img"), "the key became markup"
        b.open(srv.url + "/#/series/" + series_path(HOSTILE), "series")
        assert b.one("#series-key").text == HOSTILE
        assert not b.css("#main img") and b.js("return window.__pwned === undefined")
        b.open(srv.url + "/#/series/plain%2Fa", "series")
        assert "<b onmouseover=alert(1)>x</b>" in b.one(".sub").text
        assert not b.css("#main b")
        # the headers that keep it so
        status, _, headers = srv.request("GET", "/")
        csp = headers["Content-Security-Policy"]
        assert "script-src 'self'" in csp and "frame-ancestors 'none'" in csp and "unsafe" not in csp, csp
        assert headers["X-Content-Type-Options"] == "nosniff" and headers["X-Frame-Options"] == "DENY"
        status, js, headers = srv.request("GET", "/page/app.js")
        assert status == 200 and headers["Content-Type"].startswith("text/javascript")
        # an inline script injected into the page would be refused by the policy
        b.js("var s = document.createElement('script'); s.textContent = 'window.__inline = 1';"
             "document.body.appendChild(s);")
        assert b.js("return window.__inline === undefined"), "an inline script ran under the policy"
    finally:
        try:
            b.close(expect_errors=("Content Security Policy",))
        finally:
            srv.stop()


def test_with_tokens_an_action_without_one_is_refused_and_the_page_says_so():
    d = temp_dir()
    people = os.path.join(d, "people")
    token = "pablo-token-0123456789abcdef"
    write_people_file(people, {"pablo": ("planner", token), "olga": ("operator", OPERATOR)})
    srv = Server(SETTINGS.replace("alerts:", "server: {people_file: '%s'}\nalerts:" % people), workdir=d)
    b = Browser()
    try:
        load(srv, feed(d), token=OPERATOR)
        _, api, _ = srv.request("GET", "/v1/attention?state=open&limit=1")
        key, alert = api["rows"][0]["key"], api["rows"][0]["alerts"][0]["id"]
        b.open(srv.url + "/#/series/" + series_path(key), "series")
        # asked once for this tab; staying read-only is allowed and said
        b.wait(lambda dr: b.one("#token-panel").is_displayed(), "the token prompt")
        b.one("#token-cancel").click()
        assert b.one("#access-state").text == "Read-only"
        assert "Read-only" in b.one("#main .panel .answer.failed").text
        b.one("#act-ack-%d" % alert).click()
        assert not b.css("#a%d-acknowledge-who" % alert), "with people tokens the service records the name"
        b.one("#a%d-acknowledge-send" % alert).click()
        b.wait(lambda dr: b.css(".answer-slot .answer.failed"), "the refusal")
        assert "needs a token" in b.one(".answer-slot .answer.failed").text
        _, a, _ = srv.request("GET", "/v1/alerts/%d" % alert)
        assert a["state"] == "open", a
        # a wrong token is told; the right one signs in for this tab and the action goes through
        b.one("#token-open").click()
        b.one("#token-input").send_keys("not-the-token-000000")
        b.one("#token-form button[type=submit]").click()
        b.wait(lambda dr: "does not know" in b.one("#token-message").text, "the unknown-token message")
        b.one("#token-input").clear()
        b.one("#token-input").send_keys(token)
        b.one("#token-form button[type=submit]").click()
        b.wait(lambda dr: b.one("#access-state").text == "Signed in as pablo (planner)",
               "signed in", lambda: "access %r, message %r" % (b.one("#access-state").text,
                                                               b.one("#token-message").text))
        b.wait_ready("series")
        b.one("#act-ack-%d" % alert).click()
        b.one("#a%d-acknowledge-send" % alert).click()
        b.wait(lambda dr: b.css("#flash"), "the answer")
        _, a, _ = srv.request("GET", "/v1/alerts/%d" % alert)
        assert a["state"] == "acknowledged" and a["acknowledged_by"] == "pablo", a
        # the token stays in this tab's session only
        assert b.js("return sessionStorage.getItem('forewarden.token')") == token
        assert b.js("return localStorage.length") == 0
        # signing out from another view: the token leaves the tab
        b.open(srv.url + "/#/policies", "policies")
        assert b.css(".policy")
        b.one("#token-forget").click()
        b.wait(lambda dr: b.one("#access-state").text == "Read-only", "signed out")
    finally:
        try:
            b.close(expect_errors=("401 (Unauthorized)",))
        finally:
            srv.stop()


def test_when_reads_need_a_token_the_page_asks_first_then_shows_the_list():
    d = temp_dir()
    people = os.path.join(d, "people")
    token = "rita-reads-0123456789abcdef"
    write_people_file(people, {"rita": ("read", token), "olga": ("operator", OPERATOR)})
    srv = Server(SETTINGS.replace("alerts:", "server: {people_file: '%s', token_for_reads: true}\nalerts:" % people),
                 workdir=d)
    b = Browser()
    try:
        load(srv, feed(d), token=OPERATOR)
        b.d.get(srv.url + "/")
        b.wait(lambda dr: b.one("#token-panel").is_displayed(), "the token prompt")
        assert b.one("#access-state").text == "Token needed to read"
        b.wait(lambda dr: b.css("#main .answer.failed"), "the refusal of the list")
        assert "needs a token" in b.one("#main .answer.failed").text
        b.one("#token-input").send_keys(token)
        b.one("#token-form button[type=submit]").click()
        b.wait_ready("attention")
        assert b.one("#access-state").text == "Signed in as rita (read)"
        _, api, _ = srv.request("GET", "/v1/attention?limit=50", token=token)
        assert [tr.get_attribute("data-key") for tr in b.css("#attention tbody tr")] == [r["key"] for r in api["rows"]]
        # a reader sees the actions refused before sending
        b.one("#attention tbody a.key").click()
        b.wait_ready("series")
        assert "role read" in b.one("#main .panel .answer.failed").text
    finally:
        try:
            b.close(expect_errors=("401 (Unauthorized)",))
        finally:
            srv.stop()


def test_each_view_at_1280_and_360_wide_with_screenshots_and_timing():
    d, srv = service()
    try:
        # the pictures show a feed that ends this week, as a planner's would (same values)
        import datetime
        start = datetime.date.today() - datetime.timedelta(weeks=103)
        load(srv, feed(d, series=400, start=start.isoformat()))
        _, api, _ = srv.request("GET", "/v1/attention?state=open&limit=1")
        key = api["rows"][0]["key"]
        b = Browser()
        try:
            b.open(srv.url + "/", "attention")
            # navigation start to the list drawn, by the browser's own clock (app.js notes it)
            ms = b.js("return window.forewardenReadyMs")
            b.shot("attention")
            b.open(srv.url + "/#/series/" + series_path(key), "series")
            b.shot("series-view")
            b.open(srv.url + "/#/policies", "policies")
            b.shot("policies")
            # every control has a label (or an aria-label) and the views are keyboard reachable
            for view, ready in (("/", "attention"), ("/#/series/" + series_path(key), "series")):
                b.open(srv.url + view, ready)
                unlabelled = b.js("""
                  return [...document.querySelectorAll('input, select, textarea')].filter((e) =>
                    e.type !== 'hidden' && e.offsetParent !== null && !e.getAttribute('aria-label') &&
                    !(e.id && document.querySelector('label[for="' + e.id + '"]'))).map((e) => e.id || e.name);""")
                assert unlabelled == [], (view, unlabelled)
                buttons = b.js("return [...document.querySelectorAll('button')].filter((e) => !e.textContent.trim()).length")
                assert buttons == 0, view
                # text against its background: at least 4.5:1 (WCAG 2.1, success criterion 1.4.3)
                low = b.js(CONTRAST_SCRIPT)
                assert low == [], (view, low[:5])
        finally:
            b.close()
        narrow = Browser(360, 740)
        try:
            narrow.open(srv.url + "/", "attention")
            assert narrow.js("return window.innerWidth") == 360, narrow.js("return [window.innerWidth, screen.width, document.documentElement.clientWidth]")
            overflow = narrow.js("return document.documentElement.scrollWidth - window.innerWidth")
            assert overflow <= 0, "the page is wider than a 360 px window by %d px" % overflow
            narrow.shot("attention-360")
            narrow.open(srv.url + "/#/series/" + series_path(key), "series")
            overflow = narrow.js("return document.documentElement.scrollWidth - window.innerWidth")
            assert overflow <= 0, "the series view is wider than a 360 px window by %d px" % overflow
        finally:
            narrow.close()
        os.makedirs(SHOTS, exist_ok=True)
        with open(os.path.join(SHOTS, "timing.txt"), "w") as f:
            f.write("attention list drawn %.0f ms after navigation start (400 series)\n" % ms)
        print("attention list drawn %.0f ms after navigation start" % ms)
    finally:
        srv.stop()


def test_tune_report_draws_every_candidate_of_every_policy():
    """forewarden tune's HTML report, opened from disk: one chart per policy with a point for
    every candidate that ran (read from the chart), the chosen candidate marked in each table,
    nothing fetched and no console error."""
    d = temp_dir()
    feed(d, series=200, periods=80)
    cfg = os.path.join(d, "tune.yaml")
    with open(cfg, "w") as f:
        f.write(SETTINGS.replace("policies:\n", "policies:\n  - {name: slow, match: '*/sku-9*', period: week, "
                                 "method: sba, rules: [{name: bias, signal: trigg, limit: 0.7}]}\n"))
    report, results = os.path.join(d, "report.html"), os.path.join(d, "results.csv")
    subprocess.run([BINARY, "tune", "--config", cfg, "--input", os.path.join(d, "feed.csv"), "--truth",
                    os.path.join(d, "truth.csv"), "--report", report, "--results", results],
                   check=True, capture_output=True, timeout=DEADLINE)
    import csv
    with open(results) as f:
        rows = list(csv.DictReader(f))
    policies = []
    for r in rows:
        if r["policy"] not in policies:
            policies.append(r["policy"])
    b = Browser()
    try:
        b.open("file://" + report, "report")
        assert len(b.css("section")) == len(policies) == 2, policies
        for k, name in enumerate(policies):
            ran = [r for r in rows if r["policy"] == name and r["mase"] and r["false_alerts_per_1000"]]
            assert b.one("#chart-%d" % k).get_attribute("data-points") == str(len(ran)), name
            assert len(b.css("#chart-%d canvas" % k)) >= 1
        chosen = b.css("tr.chosen")
        assert len(chosen) == len(policies)
        assert not b.js("return performance.getEntriesByType('resource').filter(e => !e.name.startsWith('file:')).length")
        b.shot("tune-report")
    finally:
        b.close()


def test_instances_sharing_series_say_who_holds_what_and_link_a_series_held_elsewhere():
    """Two instances sharing series through Kafka (librdkafka's mock cluster): the list says
    which partitions this instance holds and links the other; a series the other holds shows a
    link to it there, and that link opens it."""
    import kafka_share_test as share
    from kafka_test import feed as kafka_feed, wait_for
    with share.Cluster() as cluster:
        keys, messages, _, _ = kafka_feed(series=24, weeks=12, seed=3)
        cluster.produce(messages)
        a = share.KafkaServer(share.settings(cluster.bootstrap))
        other = share.KafkaServer(share.settings(cluster.bootstrap))
        b = Browser()
        try:
            both = [a, other]
            urls = sorted(s.url for s in both)
            wait_for("two instances holding all 12 partitions, each known to the other", lambda:
                     share.all_ready(both) and all(sorted({p["owner"] for p in share.instances(s)["partitions"]}) == urls
                                                   for s in both))
            ends = share.ends(cluster)
            wait_for("every message applied", lambda: share.positions(cluster) == ends)
            held_there = [k for k in keys if not a.request("GET", "/v1/instances?series=" + series_path(k))[1]["series"]["here"]]
            assert held_there, "the other instance holds none of the series"
            key = held_there[0]
            b.open(a.url + "/#/", "attention")
            note = b.wait(lambda d: d.find_element(By.ID, "instances"), "the instances note")
            assert "holds partitions" in note.text and other.url in note.text, note.text
            b.open(a.url + "/#/series/" + series_path(key), "series")
            link = b.one("#held-elsewhere a")
            assert link.get_attribute("href").startswith(other.url + "/#/series/"), link.get_attribute("href")
            link.click()
            b.wait(lambda d: d.current_url.startswith(other.url), "the other instance's page")
            b.wait_ready("series")
            assert b.one("#series-key").text == key
            b.shot("instances-sharing")
        finally:
            try:
                b.close()
            finally:
                a.stop()
                other.stop()


if __name__ == "__main__":
    sys.exit(run([test_instances_sharing_series_say_who_holds_what_and_link_a_series_held_elsewhere,
                  test_attention_list_matches_the_api_and_the_keyboard_opens_a_series,
                  test_series_view_shows_both_charts_the_table_and_its_actions_change_the_api,
                  test_a_hostile_key_shows_as_text_and_no_script_runs,
                  test_with_tokens_an_action_without_one_is_refused_and_the_page_says_so,
                  test_when_reads_need_a_token_the_page_asks_first_then_shows_the_list,
                  test_each_view_at_1280_and_360_wide_with_screenshots_and_timing,
                  test_tune_report_draws_every_candidate_of_every_policy]))
