"""End-to-end test of the review page of `residue serve` (GET /) in a real browser, and of the
route it uses, POST /v1/explain.

A server on loopback is started with a token file; Debian's chromium, headless, is driven through
chromium-driver and python3-selenium. The page gets the token typed once, then a camera photo (a
scikit-image crop) and a SIMULATED generated image (tests/cli/make_labelled.py), each uploaded
through the page's file chooser, then both dropped at once; the band and probability it shows must
be those /v1/score gives for the same bytes. A truncated file must show its error, an upload without the token must show
the 401 and what to do. Under a result, the verdict buttons record the reviewer's decision (by hash,
or with the image when the service has forgotten it) and a conflicting second verdict is shown as
such. The page must load nothing from outside, keep the advisory in view, and
give every control a label. Traffic goes only to 127.0.0.1.

Usage: test_review_page.py PATH/TO/residue [SCREENSHOT.png]
"""
import base64
import json
import os
import re
import subprocess
import sys
import tempfile
import threading
import time
import urllib.error
import urllib.request

from PIL import Image
from selenium import webdriver
from selenium.webdriver.common.action_chains import ActionChains
from selenium.webdriver.chrome.service import Service
from selenium.webdriver.common.by import By
from selenium.webdriver.common.keys import Keys
from selenium.webdriver.support.ui import WebDriverWait

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, runner  # noqa: E402
import openapi_check  # noqa: E402

residue = sys.argv[1]
screenshot = sys.argv[2] if len(sys.argv) > 2 else None
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))
TOKEN = "review-page-test-token"
STORE = None


def post(base, route, data, token=TOKEN, name="upload"):
    headers = {"Content-Type": "application/octet-stream"}
    if token:
        headers["Authorization"] = "Bearer " + token
    req = urllib.request.Request(f"{base}{route}?name={name}", data=data, method="POST", headers=headers)
    try:
        with urllib.request.urlopen(req, timeout=60) as r:
            status, body = r.status, r.read()
    except urllib.error.HTTPError as e:
        status, body = e.code, e.read()
    answer = json.loads(body)
    problem = openapi_check.validate(route, "POST", status, answer)
    check(problem is None, f"{route} {status} matches docs/openapi.yaml: {problem}")
    return status, answer


def check_explain_route(base, camera, broken):
    data = open(camera, "rb").read()
    status, explained = post(base, "/v1/explain", data)
    _, scored = post(base, "/v1/score", data)
    check(status == 200, "POST /v1/explain answers 200 for a camera photo")
    for key, value in scored.items():
        check(explained.get(key) == value, f"/v1/explain's {key} equals /v1/score's for the same bytes")
    t = explained["thresholds"]
    check(0 <= t["likely_camera"] <= t["likely_generated"] <= 1, "thresholds are ordered probabilities")
    p = explained["p_generated"]
    expected_band = ("likely-generated" if p >= t["likely_generated"] else
                     "likely-camera" if p < t["likely_camera"] else "inconclusive")
    check(explained["band"] == expected_band or explained["reasons"],
          "the band follows from p and the thresholds returned (or reasons say why inconclusive)")
    for name in ("preview", "noise_residual", "residual_spectrum", "resampling_pmap_spectrum", "coding_surprise"):
        uri = explained["pictures"][name]
        png = base64.b64decode(uri.split(",", 1)[1])
        with tempfile.NamedTemporaryFile(suffix=".png") as f:
            f.write(png)
            f.flush()
            picture = Image.open(f.name)
            picture.load()
            check(picture.format == "PNG" and picture.width > 0, f"picture {name} is a PNG Pillow reads")
            if name == "preview":
                check(max(picture.size) <= 512, "the preview is at most 512 px on its longer side")
    check(explained["pictures"]["contributions_svg"].startswith("<svg"), "the contributions chart is SVG")
    status, answer = post(base, "/v1/explain", open(broken, "rb").read())
    _, scored = post(base, "/v1/score", open(broken, "rb").read())
    check(status == 422 and answer["error"]["code"] == scored["error"]["code"],
          "a truncated file gets the same error from /v1/explain as from /v1/score")
    status, answer = post(base, "/v1/explain", data, token=None)
    check(status == 401 and answer["error"]["code"] == "unauthorised", "/v1/explain needs the token")
    status, answer = post(base, "/v1/explain", b"")
    check(status == 400 and answer["error"]["code"] == "empty", f"/v1/explain refuses an empty body: {answer}")


def check_page_source(base):
    with urllib.request.urlopen(base + "/", timeout=30) as r:
        html = r.read().decode()
        headers = dict(r.headers)
    check(headers["Content-Type"].startswith("text/html"), "GET / is HTML")
    csp = headers.get("Content-Security-Policy", "")
    check("default-src 'none'" in csp and "connect-src 'self'" in csp,
          "the page may talk only to this service (Content-Security-Policy)")
    external = re.findall(r"""(?:src|href)\s*=\s*["']?(?:https?:)?//|url\(\s*["']?(?:https?:)?//|@import""", html)
    check(not external, f"the page loads nothing from outside: {external}")
    check("{{advisory}}" not in html and "sole basis for action" in html, "the advisory notice is on the page")


def start_browser():
    options = webdriver.ChromeOptions()
    options.binary_location = "/usr/bin/chromium"
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                "--window-size=1280,1800", "--no-first-run"):
        options.add_argument(arg)
    return webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=options)


def upload(browser, path):
    """Chooses one file with the page's file chooser and waits for its result card."""
    name = os.path.basename(path)
    browser.find_element(By.ID, "files").send_keys(path)
    selector = f'article.result[data-file="{name}"][data-done="true"]'
    WebDriverWait(browser, 60).until(lambda b: b.find_elements(By.CSS_SELECTOR, selector))
    return browser.find_element(By.CSS_SELECTOR, selector)


def check_shown_score(browser, base, path, what):
    card = upload(browser, path)
    _, scored = post(base, "/v1/score", open(path, "rb").read(), name=os.path.basename(path))
    band = card.find_element(By.CSS_SELECTOR, ".band")
    probability = card.find_element(By.CSS_SELECTOR, ".probability")
    check(band.text == scored["band"], f"{what}: the page shows band {band.text}, /v1/score says {scored['band']}")
    check(float(probability.get_attribute("data-p")) == scored["p_generated"],
          f"{what}: the page's probability is /v1/score's exactly")
    check(probability.text == f"{scored['p_generated']:.3f}", f"{what}: the probability is shown to 3 decimals")
    judged = card.find_element(By.CSS_SELECTOR, ".judged").text
    check(re.search(r"0\.\d{3}", judged) is not None, f"{what}: the threshold judged against is shown ({judged})")
    rows = card.find_elements(By.CSS_SELECTOR, "table.contrib tbody tr")
    check({r.get_attribute("data-family") for r in rows} == set(scored["contributions"]),
          f"{what}: the chart has one row per family")
    for row in rows:
        value = scored["contributions"][row.get_attribute("data-family")]
        cells = row.find_elements(By.TAG_NAME, "td")
        shown = float(cells[0].text.replace("\u2212", "-"))
        check(abs(shown - value) < 0.0005 and cells[1].text == ("towards generated" if value >= 0 else "towards camera"),
              f"{what}: family {row.get_attribute('data-family')} shows its value and direction in words")
    images = card.find_elements(By.CSS_SELECTOR, ".pictures img")
    check(len(images) == 4 and all(i.get_attribute("alt") for i in images),
          f"{what}: four explanation pictures (the coding-surprise map among them), each with a text alternative")
    loaded = browser.execute_script(
        "return Array.from(arguments[0].querySelectorAll('img')).every(i => i.complete && i.naturalWidth > 0);", card)
    check(loaded, f"{what}: every picture decodes in the browser")
    check(card.find_elements(By.CSS_SELECTOR, ".declared"), f"{what}: the declared provenance is shown")
    tail = scored["camera_tail"]
    check(tail is not None and tail["text"] in card.text and f"{tail['p_value']:.4f}" in card.text,
          f"{what}: the camera tail is shown in words, with its p-value")
    if scored["band"] == "inconclusive":
        shown = [li.text for li in card.find_elements(By.CSS_SELECTOR, "ul.reasons li")]
        check(shown == scored["reasons"], f"{what}: the reasons for inconclusive are listed")
    return scored


def verdicts_stored():
    out = run(["verdict", "list", "--verdicts", STORE, "--json"])
    return [json.loads(line) for line in out.stdout.splitlines() if line.strip()]


def judge(browser, card, button, generator=None):
    """Clicks one of a card's verdict buttons and waits for its confirmation."""
    status = card.find_element(By.CSS_SELECTOR, ".verdict-status")
    before = status.text
    if generator:
        field = card.find_element(By.CSS_SELECTOR, "input.generator")
        field.clear()
        field.send_keys(generator)
    card.find_element(By.CSS_SELECTOR, button).click()
    WebDriverWait(browser, 60).until(lambda b: status.text not in ("", before, "Recording\u2026"))
    return status


def check_verdict_buttons(browser, base, camera, generated):
    """The two verdict buttons under a result record what the reviewer decided, say so, and show a
    conflict; the service remembers one image only (--remember 1), so the earlier card's verdict
    goes through the fallback that sends the image itself."""
    cards = {p: browser.find_element(By.CSS_SELECTOR, f'article.result[data-file="{os.path.basename(p)}"]')
             for p in (camera, generated)}
    for card in cards.values():
        labels = card.find_elements(By.CSS_SELECTOR, ".verdict-buttons label")
        field = card.find_element(By.CSS_SELECTOR, "input.generator")
        check(len(labels) == 1 and labels[0].get_attribute("for") == field.get_attribute("id"),
              "the generator field under a result has its label")
    status = judge(browser, cards[generated], ".judge-generated", "sim-tconv")
    check(status.get_attribute("data-recorded") == "generated" and "Recorded: generated (sim-tconv)" in status.text,
          f"the page confirms a generated verdict with its generator: {status.text}")
    status = judge(browser, cards[camera], ".judge-camera")
    check(status.get_attribute("data-recorded") == "camera" and "Recorded: camera photo" in status.text,
          f"a verdict on an image the service has forgotten is recorded by sending the image: {status.text}")
    status = judge(browser, cards[camera], ".judge-generated")
    check(status.get_attribute("data-conflict") == "true" and "disagrees" in status.text,
          f"a second, different verdict on the same image is recorded and the conflict is said: {status.text}")
    stored = verdicts_stored()
    check([(v["verdict"], v["generator"], v["has_features"], v["conflict"]) for v in stored] ==
          [("generated", "sim-tconv", True, False), ("camera", None, True, True), ("generated", None, True, True)],
          f"the store holds the three verdicts, each with its vector, the conflict marked: {stored}")
    _, scored = post(base, "/v1/score", open(generated, "rb").read())
    check(stored[0]["sha256"] == scored["sha256"] and stored[0]["band"] == scored["band"],
          "the verdict records the image's hash and the band the reviewer saw")


def check_page(base, camera, generated, broken):
    browser = start_browser()
    try:
        browser.get(base + "/")
        check(browser.title.startswith("residue"), "the page loads in chromium")
        # Every control has a label, and the keyboard reaches the file chooser.
        for control in browser.find_elements(By.CSS_SELECTOR, "input"):
            labels = browser.find_elements(By.CSS_SELECTOR, f'label[for="{control.get_attribute("id")}"]')
            check(len(labels) == 1, f"input #{control.get_attribute('id')} has a label")
        reached = set()
        for _ in range(6):
            ActionChains(browser).send_keys(Keys.TAB).perform()
            reached.add(browser.switch_to.active_element.get_attribute("id"))
        check({"token", "forget", "files"} <= reached, f"the keyboard reaches every control: {reached}")

        browser.find_element(By.ID, "token").send_keys(TOKEN)
        scored = [check_shown_score(browser, base, camera, "camera photo"),
                  check_shown_score(browser, base, generated, "simulated generated image")]
        check(scored[0]["p_generated"] < scored[1]["p_generated"],
              "the simulated generated image scores above the camera photo")

        card = upload(browser, broken)
        _, answer = post(base, "/v1/score", open(broken, "rb").read())
        alert = card.find_element(By.CSS_SELECTOR, ".error[role=alert]")
        check(card.find_element(By.CSS_SELECTOR, ".error-code").text == answer["error"]["code"],
              f"a broken upload shows its error code ({answer['error']['code']})")
        check(answer["error"]["message"] in alert.text, "and its message")

        # Several images dropped at once (a drop event carrying two files, as a file manager sends).
        dropped = [(f"dropped-{i}.png", base64.b64encode(open(p, "rb").read()).decode())
                   for i, p in enumerate((camera, generated))]
        browser.execute_script("""
            const transfer = new DataTransfer();
            for (const [name, b64] of arguments[0]) {
              const bytes = Uint8Array.from(atob(b64), (c) => c.charCodeAt(0));
              transfer.items.add(new File([bytes], name, { type: "image/png" }));
            }
            const zone = document.getElementById("drop");
            zone.dispatchEvent(new DragEvent("dragover", { dataTransfer: transfer, bubbles: true, cancelable: true }));
            zone.dispatchEvent(new DragEvent("drop", { dataTransfer: transfer, bubbles: true, cancelable: true }));
        """, dropped)
        done = 'article.result[data-file^="dropped-"][data-done="true"]'
        WebDriverWait(browser, 60).until(lambda b: len(b.find_elements(By.CSS_SELECTOR, done)) == 2)
        for (name, _), expected in zip(dropped, scored):
            card = browser.find_element(By.CSS_SELECTOR, f'article.result[data-file="{name}"]')
            check(card.find_element(By.CSS_SELECTOR, ".band").text == expected["band"] and
                  float(card.find_element(By.CSS_SELECTOR, ".probability").get_attribute("data-p")) ==
                  expected["p_generated"], f"a dropped image ({name}) gets the same result as when chosen")
        check("2 images scored" in browser.find_element(By.ID, "status").text, "the status line counts both")

        check_verdict_buttons(browser, base, camera, generated)

        # The token is typed once: it survives a reload of the tab, and is gone when forgotten.
        browser.refresh()
        check(browser.find_element(By.ID, "token").get_attribute("value") == TOKEN, "the token is kept for the tab")
        browser.find_element(By.ID, "forget").click()
        check(browser.find_element(By.ID, "token").get_attribute("value") == "", "the token can be forgotten")
        card = upload(browser, camera)
        check(card.find_element(By.CSS_SELECTOR, ".error-code").text == "unauthorised" and
              "access token" in card.text, "without the token the page says so and what to do")

        # The advisory stays in view wherever the reviewer scrolls.
        browser.find_element(By.ID, "token").send_keys(TOKEN)
        upload(browser, generated)
        browser.execute_script("window.scrollTo(0, document.body.scrollHeight);")
        top = browser.execute_script("return document.getElementById('advisory').getBoundingClientRect().top;")
        check(0 <= top < 200, f"the advisory is in view after scrolling to the end (top {top})")
        browser.execute_script("window.scrollTo(0, 0);")
        if screenshot:
            browser.set_window_size(1280, 2400)
            browser.save_screenshot(screenshot)
        # Expected refusals: the 401 without a token, the 422 of the broken file, and the 404 of a
        # verdict by hash on an image the service forgot (the page then sends the image).
        logs = [e for e in browser.get_log("browser") if e["level"] == "SEVERE" and "401" not in e["message"]
                and "422" not in e["message"] and not ("/v1/verdicts" in e["message"] and "404" in e["message"])]
        check(not logs, f"no script errors or blocked resources in the browser console: {logs}")
    finally:
        browser.quit()


def main():
    with tempfile.TemporaryDirectory() as tmp:
        for name, seed in (("train", 11), ("fresh", 12)):
            subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), os.path.join(tmp, name), str(seed),
                            "png", "png", "30" if name == "train" else "2"], check=True)
        model = os.path.join(tmp, "model.json")
        check(run(["train", os.path.join(tmp, "train"), "-o", model, "--no-cache"]).returncode == 0, "train a model")
        fresh = os.path.join(tmp, "fresh")
        camera = os.path.join(fresh, "camera", sorted(os.listdir(os.path.join(fresh, "camera")))[0])
        gen_dir = os.path.join(fresh, "generated", sorted(os.listdir(os.path.join(fresh, "generated")))[0])
        generated = os.path.join(gen_dir, sorted(os.listdir(gen_dir))[0])
        broken = os.path.join(tmp, "cut-short.png")
        with open(broken, "wb") as f:
            f.write(open(camera, "rb").read()[:400])
        token_file = os.path.join(tmp, "token")
        with open(token_file, "w") as f:
            f.write(TOKEN + "\n")

        global STORE
        STORE = os.path.join(tmp, "verdicts.sqlite")
        proc = subprocess.Popen([residue, "serve", model, "--port", "0", "--token-file", token_file,
                                 "--verdicts", STORE, "--remember", "1"],
                                stderr=subprocess.PIPE, text=True)
        try:
            port = json.loads(proc.stderr.readline())["port"]
            threading.Thread(target=lambda: [None for _ in proc.stderr], daemon=True).start()
            base = f"http://127.0.0.1:{port}"
            check_page_source(base)
            check_explain_route(base, camera, broken)
            t0 = time.time()
            check_page(base, camera, generated, broken)
            print(f"browser part: {time.time() - t0:.1f} s")
        finally:
            proc.terminate()
            proc.wait(timeout=30)
    finish()


main()
