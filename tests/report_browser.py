#!/usr/bin/env python3
"""Drives report.html in a real browser (Debian's chromium through
chromium-driver and Selenium from PyPI) and checks what it shows against
volume.h5 read with h5py.

Usage: report_browser.py OUTPUT_DIR SCREENSHOT_DIR
       report_browser.py index BATCH_DIR SCREENSHOT_DIR
       report_browser.py compare PAGE DIR_A DIR_B SCREENSHOT_DIR [SIDE_A SIDE_B]
       report_browser.py svg FILE KEY VALUE

The compare mode checks a comparison page: both sides against their
volume.h5 under the shared window/level (within 1 grey level), the blink
key showing the other side, and the difference image against
A - B over the difference range (green channel 255 * (1 - |t|), within 2
levels: each side is embedded in 0.1 dB steps). With SIDE_A SIDE_B (a
dispersion sweep's page, one side per setting) it first picks those sides
in the page's A and B menus; DIR_A and DIR_B are then `run` outputs at
those two settings.

The index mode checks a batch's index.html against its batch.json: one row
per capture with its status, each failure with its reason, the links to
the captures' reports; the status filter and a numeric sort work.

Checks: the page holds no external URL and loads with networking off and no
errors in the console; stepping to frame k (arrow key) shows frame k, pixel
for pixel, under the page's window/level (grey = round((dB - black) * 255 /
range), clamped: the mapping log.json documents), within 1 grey level;
moving the window sliders changes the pixels as that formula says; the
depth scale bar's length in screen pixels matches its label through the
depth spacing within 2 %; clicking an A-line shows a depth profile whose
peak is the volume's; every fringeflow SVG plot of the folder is drawn
in the page with the file's provenance. Screenshots go to SCREENSHOT_DIR.
The svg mode parses one SVG plot as XML and checks one provenance value.
"""
import base64
import json
import pathlib
import re
import sys

import h5py
import numpy as np
from selenium import webdriver
from selenium.webdriver.chrome.service import Service
from selenium.webdriver.common.action_chains import ActionChains
from selenium.webdriver.common.by import By
from selenium.webdriver.common.keys import Keys
from selenium.webdriver.support.ui import Select, WebDriverWait


def fail(msg):
    print(f"FAIL {msg}")
    sys.exit(1)


def browser():
    o = webdriver.ChromeOptions()
    o.binary_location = "/usr/bin/chromium"
    for a in ["--headless=new", "--no-sandbox", "--disable-gpu", "--window-size=1400,1600",
              # No network: every host resolves to nothing and any proxy use fails.
              "--host-resolver-rules=MAP * ~NOTFOUND", "--proxy-server=http://127.0.0.1:9",
              "--disable-background-networking", "--disable-component-update"]:
        o.add_argument(a)
    o.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    return webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=o)


def open_page(d, page, what):
    """Loads a page from file:// and waits for its script to say it is ready."""
    d.get(page.resolve().as_uri())
    WebDriverWait(d, 30).until(lambda x: x.execute_script("return document.body.dataset.ready") in ("1", "error"))
    if d.execute_script("return document.body.dataset.ready") != "1":
        fail(f"{what} did not start: " + d.find_element(By.TAG_NAME, "body").text[:300])


def no_console_errors(d):
    errors = [e for e in d.get_log("browser") if e["level"] == "SEVERE"]
    if errors:
        fail(f"browser console errors: {errors[:3]}")


def no_external_urls(html, name):
    urls = re.findall(r"(?:https?:)?//[A-Za-z0-9.-]+\.[a-z]{2,}", html)
    if urls:
        fail(f"{name} names external URLs: {sorted(set(urls))[:5]}")


def canvas_red(d, cid):
    js = """const c = document.getElementById(arguments[0]);
    const p = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;
    let s = ''; for (let i = 0; i < p.length; i += 4) s += String.fromCharCode(p[i]);
    return [c.width, c.height, btoa(s)];"""
    w, h, b = d.execute_script(js, cid)
    return np.frombuffer(base64.b64decode(b), dtype=np.uint8).reshape(h, w).astype(int)


def expected(db, black, rng):
    return np.clip(np.round((db.astype(np.float64) - black) * 255.0 / rng), 0, 255)


def set_slider(d, sid, value):
    d.execute_script("const e = document.getElementById(arguments[0]); e.value = arguments[1]; e.dispatchEvent(new Event('input'));", sid, value)


def main(outdir, shots):
    outdir, shots = pathlib.Path(outdir), pathlib.Path(shots)
    page = outdir / "report.html"
    html = page.read_text()
    no_external_urls(html, "report.html")
    v = read_volume(outdir)
    vol = h5py.File(outdir / "volume.h5", "r")
    depth_um = vol["depth_um"][()]
    spacing = float(vol["volume_db"].attrs["depth_spacing_um"])
    log = json.load(open(outdir / "log.json"))

    d = browser()
    try:
        open_page(d, page, "the viewer")
        shown = d.execute_script("return window.fringeflowReport.data.frames_shown")
        black = float(d.find_element(By.ID, "black").get_attribute("value"))
        rng = float(d.find_element(By.ID, "range").get_attribute("value"))
        # The page opens on the first frame at the levels its PNG used.
        lv = log["frames"][0]
        if abs(black - lv["black_db"]) > 1e-6 or abs(black + rng - lv["white_db"]) > 1e-6:
            fail(f"opening levels {black}/{black + rng} dB, logged {lv['black_db']}/{lv['white_db']}")
        worst = 0
        for k in range(len(shown)):
            if k > 0:
                ActionChains(d).send_keys(Keys.ARROW_RIGHT).perform()
            f = int(d.find_element(By.ID, "bscan").get_attribute("data-frame"))
            if f != shown[k]:
                fail(f"after {k} arrow presses the page shows frame {f}, expected {shown[k]}")
            got = canvas_red(d, "bscan")
            diff = np.abs(got - expected(v[f], black, rng)).max()
            worst = max(worst, diff)
            if diff > 1:
                fail(f"frame {f}: canvas differs from volume.h5 by {diff} grey levels")
        print(f"ok frames: {len(shown)} frames by arrow key, worst difference {worst} grey level(s) at {black:.2f}/{rng:.2f} dB")
        d.save_screenshot(str(shots / "report-frames.png"))

        # A new window: black 5 dB lower, range 20 dB wider.
        nb, nr = round(black - 5, 2), round(rng + 20, 2)
        set_slider(d, "black", nb)
        set_slider(d, "range", nr)
        nb = float(d.find_element(By.ID, "black").get_attribute("value"))
        nr = float(d.find_element(By.ID, "range").get_attribute("value"))
        f = int(d.find_element(By.ID, "bscan").get_attribute("data-frame"))
        got = canvas_red(d, "bscan")
        diff = np.abs(got - expected(v[f], nb, nr)).max()
        moved = np.abs(expected(v[f], nb, nr) - expected(v[f], black, rng)).max()
        if diff > 1 or moved < 10:
            fail(f"window {nb}/{nr} dB: canvas off by {diff} grey levels (the change moved pixels by up to {moved})")
        print(f"ok window: {nb:.2f}/{nr:.2f} dB within {diff} grey level(s) of the formula")

        # Scale bar: screen length against its label through the depth spacing.
        canvas = d.find_element(By.ID, "bscan")
        css_h = canvas.rect["height"]
        px_per_um = css_h / (v.shape[1] * spacing)
        bar = d.find_element(By.ID, "scale-bar")
        label = d.find_element(By.ID, "scale-label").text
        um = float(label.split()[0])
        ratio = bar.rect["height"] / (um * px_per_um)
        if abs(ratio - 1) > 0.02:
            fail(f"scale bar {bar.rect['height']:.1f} px for '{label}', expected {um * px_per_um:.1f} px")
        print(f"ok scale bar: {bar.rect['height']:.1f} px for {label} ({ratio:.4f} of the spacing's length)")

        # Click the middle A-line: its profile's peak is the volume's.
        a = v.shape[2] // 2
        w = canvas.rect["width"]
        x = (a + 0.5) / v.shape[2] * w - w / 2
        ActionChains(d).move_to_element_with_offset(canvas, x, 0).click().perform()
        p = d.find_element(By.ID, "profile-peak")
        # Selenium moves by whole screen pixels, so the click may land on a
        # neighbour of a; the profile must be of the A-line clicked.
        clicked = int(p.get_attribute("data-aline"))
        if abs(clicked - a) > 1:
            fail(f"clicked A-line {a}, the profile is of {clicked}")
        a = clicked
        peak_um = float(p.get_attribute("data-peak-um"))
        col = v[f, :, a]
        z = int(np.argmax(col))
        zi = int(np.argmin(np.abs(depth_um - peak_um)))
        # Equal, or a tie within the embedded 0.1 dB steps.
        if zi != z and col[z] - col[zi] > 0.1:
            fail(f"profile peak at {peak_um} um ({col[zi]:.2f} dB), the volume's at {depth_um[z]} um ({col[z]:.2f} dB)")
        print(f"ok profile: A-line {a} peaks at {peak_um:.2f} um (volume {depth_um[z]:.2f} um)")
        d.save_screenshot(str(shots / "report-profile.png"))

        check_plots(d, outdir, shots)
        no_console_errors(d)
        print("ok console: no errors")
    finally:
        d.quit()


def svg_desc(path):
    """The provenance lines of a fringeflow SVG, parsed as XML (ElementTree)."""
    import xml.etree.ElementTree as ET
    root = ET.parse(path).getroot()
    ns = "{http://www.w3.org/2000/svg}"
    if root.tag != ns + "svg":
        fail(f"{path}: root element {root.tag}, not svg")
    desc = root.find(ns + "desc")
    if desc is None or not desc.text:
        fail(f"{path}: no <desc> provenance")
    return dict(line.split(": ", 1) for line in desc.text.splitlines())


def check_plots(d, outdir, shots):
    """Every fringeflow SVG of the folder is drawn in the page: a figure of
    that name, rendered larger than 300 x 300 px, with text, and the same
    provenance as the file."""
    files = sorted(p for p in outdir.glob("*.svg") if "data-fringeflow-plot" in p.read_text()[:2000])
    figures = d.find_elements(By.CSS_SELECTOR, "figure.plot")
    names = [f.get_attribute("data-file") for f in figures]
    if names != [p.name for p in files]:
        fail(f"plots in the page {names}, in the folder {[p.name for p in files]}")
    for fig, path in zip(figures, files):
        svg = fig.find_element(By.TAG_NAME, "svg")
        if svg.rect["width"] < 300 or svg.rect["height"] < 300:
            fail(f"{path.name} drawn {svg.rect['width']:.0f} x {svg.rect['height']:.0f} px")
        texts = d.execute_script("return arguments[0].querySelectorAll('text').length", svg)
        if texts < 10:
            fail(f"{path.name}: {texts} text elements in the page")
        inline = d.execute_script("return arguments[0].querySelector('desc').textContent", svg)
        want = svg_desc(path)
        got = dict(line.split(": ", 1) for line in inline.splitlines())
        if got != want:
            fail(f"{path.name}: provenance in the page {got} differs from the file's {want}")
        d.execute_script("arguments[0].scrollIntoView()", fig)
    if files:
        d.save_screenshot(str(shots / "report-plots.png"))
    print(f"ok plots: {len(files)} SVG plot(s) drawn with their provenance")


def check_index(batch, shots):
    batch, shots = pathlib.Path(batch), pathlib.Path(shots)
    page = batch / "index.html"
    html = page.read_text()
    no_external_urls(html, "index.html")
    summary = json.load(open(batch / "batch.json"))
    d = browser()
    try:
        open_page(d, page, "the batch page")
        rows = d.find_elements(By.CSS_SELECTOR, "#captures tbody tr")
        if len(rows) != len(summary["captures"]):
            fail(f"index lists {len(rows)} captures, batch.json {len(summary['captures'])}")
        by_input = {r.find_elements(By.TAG_NAME, "td")[1].text: r for r in rows}
        for c in summary["captures"]:
            r = by_input.get(c["input"])
            if r is None:
                fail(f"{c['input']} missing from index.html")
            cells = r.find_elements(By.TAG_NAME, "td")
            if cells[0].text != c["status"]:
                fail(f"{c['input']}: status {cells[0].text}, batch.json {c['status']}")
            if c["status"] == "failed" and c["reason"] not in cells[8].text:
                fail(f"{c['input']}: reason {cells[8].text!r} does not show {c['reason']!r}")
            if c["status"] == "done":
                link = cells[7].find_element(By.TAG_NAME, "a").get_attribute("href")
                if not link.endswith("/report.html") or not pathlib.Path(link.replace("file://", "")).exists():
                    fail(f"{c['input']}: report link {link}")
                if not cells[6].find_elements(By.TAG_NAME, "img"):
                    fail(f"{c['input']}: no thumbnail")
        failed = sum(c["status"] == "failed" for c in summary["captures"])
        Select(d.find_element(By.ID, "status")).select_by_value("failed")
        visible = [r for r in rows if r.is_displayed()]
        if len(visible) != failed:
            fail(f"status filter 'failed' shows {len(visible)} rows, expected {failed}")
        d.save_screenshot(str(shots / "index-failed.png"))
        Select(d.find_element(By.ID, "status")).select_by_value("")
        # Sorting by seconds (twice: descending) puts the slowest first.
        th = d.find_elements(By.CSS_SELECTOR, "#captures th")[4]
        th.click()
        th.click()
        first = d.find_elements(By.CSS_SELECTOR, "#captures tbody tr")[0].find_elements(By.TAG_NAME, "td")[1].text
        slowest = max(summary["captures"], key=lambda c: c["seconds"])["input"]
        if first != slowest:
            fail(f"sorted by seconds (descending) the first row is {first}, the slowest is {slowest}")
        no_console_errors(d)
        print(f"ok index: {len(rows)} captures, {failed} failed with reasons, filter and sort work, no console errors")
    finally:
        d.quit()


def read_volume(d):
    vol = h5py.File(pathlib.Path(d) / "volume.h5", "r")
    v = vol["volume_db"][()].astype(np.float64)
    if "scale_factor" in vol["volume_db"].attrs:
        v = v * vol["volume_db"].attrs["scale_factor"] + vol["volume_db"].attrs["add_offset"]
    return v


def check_compare(page, da, db, shots, picks=None):
    page, shots = pathlib.Path(page), pathlib.Path(shots)
    va, vb = read_volume(da), read_volume(db)
    d = browser()
    try:
        open_page(d, page, "the comparison")
        if picks is not None:
            for sid, side in zip(("pick-a", "pick-b"), picks):
                Select(d.find_element(By.ID, sid)).select_by_value(str(side))
            got = d.execute_script("return window.fringeflowCompare.st.pick")
            if got != list(picks):
                fail(f"picked sides {got}, asked for {list(picks)}")
        black = float(d.find_element(By.ID, "black").get_attribute("value"))
        rng = float(d.find_element(By.ID, "range").get_attribute("value"))
        for cid, v in (("canvas-a", va), ("canvas-b", vb)):
            diff = np.abs(canvas_red(d, cid) - expected(v[0], black, rng)).max()
            if diff > 1:
                fail(f"{cid}: differs from its volume.h5 by {diff} grey levels")
        d.find_element(By.ID, "mode-blink").click()
        sides = []
        for k in range(2):
            c = d.find_element(By.ID, "canvas-blink")
            sides.append(c.get_attribute("data-side"))
            want = va if sides[-1] == "A" else vb
            diff = np.abs(canvas_red(d, "canvas-blink") - expected(want[0], black, rng)).max()
            if diff > 1:
                fail(f"blink view showing {sides[-1]} differs from its volume by {diff}")
            ActionChains(d).send_keys("b").perform()
        if sides != ["A", "B"]:
            fail(f"blink key showed {sides}, expected A then B")
        dr = float(d.find_element(By.ID, "diff-range").get_attribute("value"))
        js = """const c = document.getElementById('canvas-diff');
        const p = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;
        let s = ''; for (let i = 1; i < p.length; i += 4) s += String.fromCharCode(p[i]);
        return btoa(s);"""
        g = np.frombuffer(base64.b64decode(d.execute_script(js)), dtype=np.uint8).reshape(va.shape[1:]).astype(int)
        base = d.execute_script("return window.fringeflowCompare.data.base_db")
        # Values below the embedded floor show as the floor on both sides.
        t = np.clip((np.maximum(va[0], base) - np.maximum(vb[0], base)) / dr, -1, 1)
        diff = np.abs(g - np.round(255 * (1 - np.abs(t)))).max()
        if diff > 2:
            fail(f"difference image off by {diff} levels")
        d.save_screenshot(str(shots / ("compare.png" if picks is None else "sweep.png")))
        no_console_errors(d)
        print(f"ok compare: both sides within 1 grey level, blink A then B, difference within {diff} levels, no console errors")
    finally:
        d.quit()


if __name__ == "__main__":
    if sys.argv[1] == "svg":
        # svg FILE KEY VALUE: the file parses as SVG and its provenance KEY is VALUE (1e-5 relative).
        got = float(svg_desc(sys.argv[2])[sys.argv[3]])
        want = float(sys.argv[4])
        if abs(got - want) > 1e-5 * max(abs(want), 1e-9):
            fail(f"{sys.argv[2]}: {sys.argv[3]} {got}, expected {want}")
        print(f"ok svg: {sys.argv[3]} {got}")
    elif sys.argv[1] == "compare":
        picks = [int(v) for v in sys.argv[6:8]] if len(sys.argv) >= 8 else None
        check_compare(sys.argv[2], sys.argv[3], sys.argv[4], sys.argv[5], picks)
    elif sys.argv[1] == "index":
        check_index(sys.argv[2], sys.argv[3])
    else:
        main(sys.argv[1], sys.argv[2])
