"""The demo appendix in a real browser: headless Chromium lays the page out and a small
script checks what only a browser can see.

The test copies the demo's appendix.html, injects a checking script just before ``</body>``
and lets Chromium load the copy from disk with every host name unresolvable, so that any
attempt to reach the network fails and shows up in the resource timing list. The script
writes a JSON report into a ``<pre id="rk-browser-check">`` element and ``--dump-dom``
prints the page with it. It checks: every section of ``reportkit.report.html.SECTIONS``,
loaded images and figures, tables that fit the page (or scroll inside their ``.table-wrap``)
at 1280 px and at 800 px, no external URL and no network request, heading order, and the
WCAG 2.1 contrast of every visible text element (W3C 2018, success criterion 1.4.3;
relative luminance and contrast ratio as defined in the WCAG 2.1 glossary).

The same script runs once on a small page built to break every rule, so that a checker
that reports nothing cannot pass unnoticed. A screenshot of the appendix is saved in the
test's temporary folder and its path printed.

Chromium is looked up on PATH. Without it the module is skipped, unless the environment
variable CI is set: then a missing browser fails, so that a CI image that forgot to install
it (see .ci/run) is caught.
"""

from __future__ import annotations

import html
import json
import os
import re
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

from reportkit import api
from reportkit.report.html import SECTIONS

REPO = Path(__file__).resolve().parents[1]
DEMO_SPEC = REPO / "fixtures" / "demo" / "tutoring.yaml"
BROWSER_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
REPORT_ID = "rk-browser-check"
WIDTHS = (1280, 800)
WINDOW_HEIGHT = 2400
TIMEOUT_S = 180
# WCAG 2.1 success criterion 1.4.3 (contrast, minimum): 4.5:1, 3:1 for large text.
MIN_CONTRAST = 4.5
MIN_CONTRAST_LARGE = 3.0
# Tables that may scroll inside their .table-wrap even in a 1280 px window: the balance table
# has one column per instrument group (nine columns for the demo's four distance groups) and
# keeps its group labels on one line on purpose (screen.css, table.balance th.group-name).
# Any other table must fit the 54rem column at that width.
MAY_SCROLL_AT_1280 = {"balance"}

# Flags: all present in Chromium 156 (checked against the binary's switch names).
# --headless is the new headless mode (the full browser without a window).
# --host-resolver-rules makes every host name unresolvable, so no request can leave the
# machine; an attempt still shows up in the page's resource timing list.
BASE_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-extensions",
    "--no-first-run",
    "--hide-scrollbars",
    "--host-resolver-rules=MAP * ~NOTFOUND, EXCLUDE localhost",
    "--virtual-time-budget=10000",
)

CHECK_SCRIPT = r"""
<script>
(function () {
  "use strict";
  var SECTION_IDS = __SECTION_IDS__;
  var MIN_CONTRAST = __MIN_CONTRAST__, MIN_CONTRAST_LARGE = __MIN_CONTRAST_LARGE__;
  var REPORT_ID = "__REPORT_ID__";
  var requested = [];
  try {
    new PerformanceObserver(function (list) {
      list.getEntries().forEach(function (e) { requested.push(e.name); });
    }).observe({type: "resource", buffered: true});
  } catch (e) { requested.push("PerformanceObserver failed: " + e); }

  function cssPath(el) {
    var parts = [];
    while (el && el.nodeType === 1 && el !== document.documentElement) {
      if (el.id) { parts.unshift("#" + CSS.escape(el.id)); break; }
      var part = el.localName;
      if (el.classList.length) { part += "." + Array.from(el.classList).join("."); }
      var parent = el.parentElement;
      if (parent) {
        var same = Array.from(parent.children).filter(function (c) {
          return c.localName === el.localName;
        });
        if (same.length > 1) { part += ":nth-of-type(" + (same.indexOf(el) + 1) + ")"; }
      }
      parts.unshift(part);
      el = parent;
    }
    return parts.join(" > ");
  }

  // Any CSS colour -> [r, g, b, a] (0-255, alpha 0-1), through a canvas so that every
  // syntax the browser may return (rgb(), color(srgb ...), ...) is handled alike.
  var canvas = document.createElement("canvas");
  canvas.width = canvas.height = 1;
  var ctx = canvas.getContext("2d", {willReadFrequently: true});
  function rgba(css) {
    ctx.clearRect(0, 0, 1, 1);
    ctx.fillStyle = "rgba(0, 0, 0, 0)";
    ctx.fillStyle = css;
    ctx.fillRect(0, 0, 1, 1);
    var d = ctx.getImageData(0, 0, 1, 1).data;
    return [d[0], d[1], d[2], d[3] / 255];
  }
  function over(top, bottom) {  // top composited over an opaque bottom
    var a = top[3];
    return [0, 1, 2].map(function (i) { return top[i] * a + bottom[i] * (1 - a); })
      .concat([1]);
  }
  function luminance(c) {  // WCAG 2.1 relative luminance
    var lin = c.slice(0, 3).map(function (v) {
      v = v / 255;
      return v <= 0.03928 ? v / 12.92 : Math.pow((v + 0.055) / 1.055, 2.4);
    });
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2];
  }
  function ratio(a, b) {
    var la = luminance(a), lb = luminance(b);
    return (Math.max(la, lb) + 0.05) / (Math.min(la, lb) + 0.05);
  }
  function hex(c) {
    return "#" + c.slice(0, 3).map(function (v) {
      return ("0" + Math.round(v).toString(16)).slice(-2);
    }).join("");
  }
  // The background under el: translucent layers up the tree composited down to the first
  // opaque one (the canvas is white when none is opaque). A background image cannot be
  // judged this way: it is reported as such.
  function backgroundOf(el) {
    var layers = [];
    for (var n = el; n && n.nodeType === 1; n = n.parentElement) {
      var s = getComputedStyle(n);
      if (s.backgroundImage && s.backgroundImage !== "none") {
        return {image: cssPath(n)};
      }
      var c = rgba(s.backgroundColor);
      if (c[3] > 0) { layers.push(c); }
      if (c[3] >= 1) { break; }
    }
    var base = [255, 255, 255, 1];
    if (layers.length && layers[layers.length - 1][3] >= 1) { base = layers.pop(); }
    while (layers.length) { base = over(layers.pop(), base); }
    return {color: base};
  }
  function ownText(el) {
    return Array.from(el.childNodes).filter(function (n) {
      return n.nodeType === 3 && n.textContent.trim() !== "";
    }).map(function (n) { return n.textContent.trim(); }).join(" ");
  }
  function visible(el) {
    var r = el.getBoundingClientRect();
    if (r.width === 0 || r.height === 0) { return false; }
    return el.checkVisibility({checkOpacity: true, checkVisibilityCSS: true});
  }

  function sections() {
    return SECTION_IDS.filter(function (id) {
      var el = document.getElementById(id);
      return !(el && el.localName === "section" && visible(el));
    });
  }

  function images() {
    var out = [];
    Array.from(document.images).forEach(function (img) {
      var r = img.getBoundingClientRect();
      if (!(img.complete && img.naturalWidth > 0 && r.width > 0 && r.height > 0)) {
        out.push({selector: cssPath(img), src: img.getAttribute("src").slice(0, 60),
                  complete: img.complete, naturalWidth: img.naturalWidth});
      }
    });
    return out;
  }

  function figures() {
    var out = {count: 0, failures: []};
    document.querySelectorAll("figure").forEach(function (fig) {
      out.count += 1;
      var graphic = fig.querySelector("img, svg");
      var problem = null;
      if (!graphic) {
        problem = "no img or svg";
      } else {
        var r = graphic.getBoundingClientRect();
        if (r.width === 0 || r.height === 0) { problem = "graphic has no size"; }
        if (graphic.localName === "img" &&
            !(graphic.complete && graphic.naturalWidth > 0)) { problem = "image not loaded"; }
      }
      var cap = fig.querySelector("figcaption");
      if (!problem && !(cap && cap.textContent.trim())) { problem = "no caption"; }
      if (problem) { out.failures.push({selector: cssPath(fig), problem: problem}); }
    });
    return out;
  }

  // A table may be wider than the page only inside a box that scrolls sideways and itself
  // fits the page; the document itself must never scroll sideways.
  function tables() {
    var page = document.documentElement.clientWidth;
    var out = {failures: [], scrolled: [], page_width: page,
               document_width: document.documentElement.scrollWidth};
    document.querySelectorAll("table").forEach(function (t) {
      var r = t.getBoundingClientRect();
      var box = null;
      for (var n = t.parentElement; n && n !== document.body; n = n.parentElement) {
        var ox = getComputedStyle(n).overflowX;
        if (ox === "auto" || ox === "scroll") { box = n; break; }
      }
      var entry = {selector: cssPath(t), classes: Array.from(t.classList),
                   table_width: Math.round(r.width),
                   left: Math.round(r.left), right: Math.round(r.right)};
      if (box) {
        var b = box.getBoundingClientRect();
        entry.container = cssPath(box);
        entry.container_width = Math.round(b.width);
        if (b.left < -0.5 || b.right > page + 0.5) {
          entry.problem = "its scrolling container is wider than the page";
          out.failures.push(entry);
        } else if (box.scrollWidth > box.clientWidth + 1) {
          out.scrolled.push(entry);
        }
      } else if (r.left < -0.5 || r.right > page + 0.5) {
        entry.problem = "wider than the page and not in a scrolling container";
        out.failures.push(entry);
      }
    });
    return out;
  }

  var URL_ATTRS = ["src", "href", "srcset", "poster", "data", "action", "formaction",
                   "xlink:href", "background", "cite", "longdesc", "manifest", "ping"];
  var EXTERNAL = /^\s*(https?:|\/\/)|url\(\s*["']?\s*(https?:|\/\/)|@import/i;
  function externalReferences() {
    var out = [];
    document.querySelectorAll("*").forEach(function (el) {
      if (el.id === REPORT_ID) { return; }
      URL_ATTRS.forEach(function (name) {
        var v = el.getAttribute(name);
        if (v !== null && EXTERNAL.test(v)) {
          out.push({selector: cssPath(el), attribute: name, value: v.slice(0, 80)});
        }
      });
      var style = el.getAttribute("style");
      if (style && EXTERNAL.test(style)) {
        out.push({selector: cssPath(el), attribute: "style", value: style.slice(0, 80)});
      }
    });
    Array.from(document.styleSheets).forEach(function (sheet, i) {
      if (sheet.href) { out.push({stylesheet: sheet.href}); }
      Array.from(sheet.cssRules).forEach(function (rule) {
        if (EXTERNAL.test(rule.cssText)) {
          out.push({stylesheet: i, rule: rule.cssText.slice(0, 120)});
        }
      });
    });
    return out;
  }

  function networkRequests() {
    var names = requested.concat(performance.getEntriesByType("resource").map(function (e) {
      return e.name;
    }));
    return Array.from(new Set(names)).filter(function (n) { return !/^data:/i.test(n); });
  }

  function headings() {
    var out = {h1_count: 0, skips: [], count: 0};
    var previous = 0;
    document.querySelectorAll("h1, h2, h3, h4, h5, h6").forEach(function (h) {
      var level = Number(h.localName.slice(1));
      out.count += 1;
      if (level === 1) { out.h1_count += 1; }
      if (level > previous + 1) {
        out.skips.push({selector: cssPath(h), from: previous, to: level,
                        text: h.textContent.trim().slice(0, 60)});
      }
      previous = level;
    });
    return out;
  }

  function contrast() {
    var out = {checked: 0, failures: [], unchecked: []};
    document.querySelectorAll("body *").forEach(function (el) {
      if (el.id === REPORT_ID || el.closest("svg, script, style, noscript")) { return; }
      var text = ownText(el);
      if (!text || !visible(el)) { return; }
      var s = getComputedStyle(el);
      var bg = backgroundOf(el);
      if (bg.image) {
        out.unchecked.push({selector: cssPath(el), background_image_on: bg.image});
        return;
      }
      var fg = over(rgba(s.color), bg.color);
      var size = parseFloat(s.fontSize), weight = Number(s.fontWeight) || 400;
      // large text: at least 18 pt, or 14 pt bold (24 px; 18.66 px at weight 700)
      var large = size >= 24 || (size >= 18.66 && weight >= 700);
      var need = large ? MIN_CONTRAST_LARGE : MIN_CONTRAST;
      var value = ratio(fg, bg.color);
      out.checked += 1;
      if (value < need) {
        out.failures.push({selector: cssPath(el), ratio: Math.round(value * 100) / 100,
                           required: need, color: hex(fg), background: hex(bg.color),
                           font_size_px: size, font_weight: weight,
                           text: text.slice(0, 50)});
      }
    });
    return out;
  }

  function check() {
    return {
      viewport: {width: window.innerWidth, height: window.innerHeight},
      missing_sections: sections(),
      image_failures: images(),
      image_count: document.images.length,
      inline_svg_count: document.querySelectorAll("svg").length,
      figures: figures(),
      tables: tables(),
      external_references: externalReferences(),
      network_requests: networkRequests(),
      headings: headings(),
      contrast: contrast()
    };
  }

  window.addEventListener("load", function () {
    setTimeout(function () {
      var report;
      try { report = check(); } catch (e) { report = {error: String(e && e.stack || e)}; }
      var pre = document.createElement("pre");
      pre.id = REPORT_ID;
      pre.textContent = JSON.stringify(report);
      document.body.appendChild(pre);
    }, 0);
  });
})();
</script>
"""

# A page that breaks every rule the script checks; each break must be reported.
BROKEN_PAGE = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>broken</title>
<style>body { margin: 0; } .wide { width: 3000px; } .pale { color: #aaaaaa; }</style>
</head><body>
<h1>One</h1><h3>Skips a level</h3><h1>Two</h1>
<section id="present-section"><p>here</p></section>
<p class="pale">Pale grey text on white (contrast 2.32:1)</p>
<img alt="broken" src="data:image/png;base64,AAAA">
<img alt="remote" src="http://example.invalid/remote.png">
<figure><figcaption>A figure with no graphic</figcaption></figure>
<table class="wide"><tr><th scope="col">A table wider than any page</th></tr></table>
</body></html>
"""


@dataclass(frozen=True)
class BrowserPage:
    """One page to load and what to do with it."""

    source: Path
    width: int
    screenshot: Path | None = None


def find_chromium() -> str | None:
    """The first Chromium-family browser on PATH, or None."""
    for name in BROWSER_NAMES:
        found = shutil.which(name)
        if found:
            return found
    return None


@pytest.fixture(scope="module")
def chromium() -> str:
    found = find_chromium()
    if found:
        return found
    looked_for = ", ".join(BROWSER_NAMES)
    if os.environ.get("CI"):
        pytest.fail(
            f"CI is set but no Chromium browser is on PATH (looked for {looked_for}); "
            "the CI image must install the Debian package 'chromium' (see .ci/run)."
        )
    pytest.skip(
        f"no Chromium browser on PATH (looked for {looked_for}); install the Debian "
        "package 'chromium' to run the browser checks"
    )


def with_check_script(page: str, section_ids: list[str]) -> str:
    """The page with the checking script injected just before its last ``</body>``."""
    script = (
        CHECK_SCRIPT.replace("__SECTION_IDS__", json.dumps(section_ids))
        .replace("__MIN_CONTRAST_LARGE__", repr(MIN_CONTRAST_LARGE))
        .replace("__MIN_CONTRAST__", repr(MIN_CONTRAST))
        .replace("__REPORT_ID__", REPORT_ID)
    )
    at = page.lower().rfind("</body>")
    assert at >= 0, "the page has no </body>"
    return page[:at] + script + page[at:]


def browser_command(binary: str, page: BrowserPage, profile: Path) -> list[str]:
    command = [
        binary,
        *BASE_FLAGS,
        f"--user-data-dir={profile}",
        f"--window-size={page.width},{WINDOW_HEIGHT}",
    ]
    if page.screenshot is not None:
        command.append(f"--screenshot={page.screenshot}")
    else:
        command.append("--dump-dom")
    return [*command, page.source.resolve().as_uri()]


def run_pages(binary: str, pages: list[BrowserPage], work: Path) -> list[str]:
    """Load the pages in parallel (one browser profile each); the DOM printed for each."""
    procs = []
    for i, page in enumerate(pages):
        profile = work / f"profile-{i}"
        profile.mkdir()
        procs.append(
            subprocess.Popen(
                browser_command(binary, page, profile),
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                text=True,
                env={**os.environ, "HOME": str(profile)},
            )
        )
    outputs = []
    for proc in procs:
        try:
            out, err = proc.communicate(timeout=TIMEOUT_S)
        except subprocess.TimeoutExpired:
            proc.kill()
            out, err = proc.communicate()
            pytest.fail(f"Chromium did not finish in {TIMEOUT_S} s: {err[-2000:]}")
        assert proc.returncode == 0, f"Chromium failed ({proc.returncode}): {err[-2000:]}"
        outputs.append(out)
    return outputs


def parse_report(dom: str) -> dict[str, Any]:
    """The JSON report the checking script left in the dumped DOM."""
    found = re.search(rf'<pre id="{REPORT_ID}">(.*?)</pre>', dom, re.DOTALL)
    assert found, f"the checking script left no report; end of the DOM: {dom[-1500:]}"
    report = json.loads(html.unescape(found.group(1)))
    assert "error" not in report, f"the checking script failed: {report['error']}"
    return report


@dataclass(frozen=True)
class BrowserRun:
    """The reports per window width, the broken page's report and the screenshot."""

    reports: dict[int, dict[str, Any]]
    broken: dict[str, Any]
    screenshot: Path
    figure_files: int


@pytest.fixture(scope="module")
def browser_run(chromium: str, tmp_path_factory: pytest.TempPathFactory) -> BrowserRun:
    work = tmp_path_factory.mktemp("browser")
    bundle = work / "bundle"
    api.run(api.load(DEMO_SPEC), output=bundle, command="reportkit demo bundle", pdf=False)
    section_ids = [s.id for s in SECTIONS]
    page = (bundle / "appendix.html").read_text(encoding="utf-8")
    checked = work / "appendix-checked.html"
    checked.write_text(with_check_script(page, section_ids), encoding="utf-8")
    broken = work / "broken.html"
    broken.write_text(
        with_check_script(BROKEN_PAGE, ["present-section", "absent-section"]), encoding="utf-8"
    )
    screenshot = work / "appendix-1280.png"
    pages = [
        *(BrowserPage(checked, width) for width in WIDTHS),
        BrowserPage(broken, 800),
        BrowserPage(bundle / "appendix.html", WIDTHS[0], screenshot=screenshot),
    ]
    outputs = run_pages(chromium, pages, work)
    print(f"\nscreenshot of the demo appendix at 1280 px: {screenshot}")
    return BrowserRun(
        reports={w: parse_report(out) for w, out in zip(WIDTHS, outputs, strict=False)},
        broken=parse_report(outputs[len(WIDTHS)]),
        screenshot=screenshot,
        figure_files=len(list((bundle / "figures").glob("*.svg"))),
    )


def test_checker_reports_every_kind_of_defect(browser_run: BrowserRun) -> None:
    # The script must be able to fail: each rule is broken once on BROKEN_PAGE.
    r = browser_run.broken
    assert r["missing_sections"] == ["absent-section"]
    assert len(r["image_failures"]) == 2  # an undecodable image and an unreachable one
    assert [f["problem"] for f in r["figures"]["failures"]] == ["no img or svg"]
    assert [f["selector"] for f in r["tables"]["failures"]] == ["body > table.wide"]
    assert r["tables"]["document_width"] > r["tables"]["page_width"]
    assert [e["attribute"] for e in r["external_references"]] == ["src"]
    assert r["network_requests"] == ["http://example.invalid/remote.png"]
    assert r["headings"]["h1_count"] == 2
    assert [(s["from"], s["to"]) for s in r["headings"]["skips"]] == [(1, 3)]
    # #aaaaaa on white: (1.05) / (0.402 + 0.05) = 2.32 (WCAG 2.1 formula worked by hand)
    pale = [f for f in r["contrast"]["failures"] if f["selector"] == "body > p.pale"]
    assert len(pale) == 1 and pale[0]["ratio"] == pytest.approx(2.32, abs=0.01)
    assert pale[0]["color"] == "#aaaaaa" and pale[0]["background"] == "#ffffff"


@pytest.mark.parametrize("width", WIDTHS)
def test_every_section_present(browser_run: BrowserRun, width: int) -> None:
    report = browser_run.reports[width]
    assert report["viewport"]["width"] == width
    assert report["missing_sections"] == []


@pytest.mark.parametrize("width", WIDTHS)
def test_images_and_figures_load(browser_run: BrowserRun, width: int) -> None:
    report = browser_run.reports[width]
    assert report["image_failures"] == []
    figures = report["figures"]
    assert figures["failures"] == []
    # every figure file of the bundle is shown in the page, as an image or inline SVG
    assert figures["count"] == browser_run.figure_files > 0
    assert report["image_count"] + report["inline_svg_count"] >= browser_run.figure_files


@pytest.mark.parametrize("width", WIDTHS)
def test_tables_fit_the_page_or_scroll_in_their_wrapper(
    browser_run: BrowserRun, width: int
) -> None:
    tables = browser_run.reports[width]["tables"]
    assert tables["failures"] == []
    assert tables["document_width"] <= tables["page_width"], "the page scrolls sideways"
    scrolled = tables["scrolled"]
    if scrolled:
        print(f"\nat {width} px these tables scroll inside their wrapper: {scrolled}")
    if width == 1280:
        unexpected = [t for t in scrolled if not set(t["classes"]) & MAY_SCROLL_AT_1280]
        assert unexpected == [], "tables that do not fit the page at 1280 px"


@pytest.mark.parametrize("width", WIDTHS)
def test_nothing_leaves_the_machine(browser_run: BrowserRun, width: int) -> None:
    report = browser_run.reports[width]
    assert report["external_references"] == []
    assert report["network_requests"] == []


def test_heading_order(browser_run: BrowserRun) -> None:
    headings = browser_run.reports[WIDTHS[0]]["headings"]
    assert headings["h1_count"] == 1
    assert headings["skips"] == []
    assert headings["count"] > len(SECTIONS)


@pytest.mark.parametrize("width", WIDTHS)
def test_text_contrast(browser_run: BrowserRun, width: int) -> None:
    result = browser_run.reports[width]["contrast"]
    # the demo has hundreds of text elements; a checker that saw few is broken
    assert result["checked"] > 300
    assert result["unchecked"] == []
    assert result["failures"] == [], json.dumps(result["failures"], indent=1)


def test_screenshot_is_a_picture(browser_run: BrowserRun) -> None:
    from matplotlib import image

    path = browser_run.screenshot
    print(f"\nscreenshot: {path}")
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert len(data) > 20_000
    pixels = image.imread(path)
    assert pixels.shape[:2] == (WINDOW_HEIGHT, WIDTHS[0])
    flat = pixels.reshape(-1, pixels.shape[2])
    assert (flat != flat[0]).any(axis=1).mean() > 0.01  # more than 1% of pixels are not blank
