"""Accessibility and self-containment of the demo appendix, checked without a browser.

The demo is rendered with the Python API (no PDF) and read with the standard library's
``html.parser`` under a strict nesting check written here (html5lib is not among the test
dependencies): every element closed explicitly and in order, no block inside a paragraph
(a browser would silently close the paragraph), no duplicate ids or attributes, and every
in-page reference pointing at an existing id. On the resulting tree: table header cells carry
``scope``, images carry alt text, figures carry captions, ``<html>`` carries ``lang``
(WCAG 2.1 success criteria 1.1.1, 1.3.1 and 3.1.1), and no attribute or style refers to
anything outside the file.

The colours of templates/styles/screen.css are checked against WCAG 2.1 success criterion
1.4.3 (4.5:1 for body text), with relative luminance and contrast ratio as defined in the
WCAG 2.1 glossary (W3C 2018). Which pairs: a rule that sets both a text colour and a
background is checked on its own background; every other text colour may sit on the page or
inside any tinted box the stylesheet declares (a background without a text colour of its own:
verdicts, cautions, quoted arguments, highlighted table rows), so it is checked on each of
them. The browser test (tests/test_browser.py) checks the colours actually rendered.
"""

from __future__ import annotations

import base64
import re
import urllib.parse
from collections.abc import Iterator
from dataclasses import dataclass, field
from html.parser import HTMLParser
from pathlib import Path

import pytest

from reportkit import api

REPO = Path(__file__).resolve().parents[1]
DEMO_SPEC = REPO / "fixtures" / "demo" / "tutoring.yaml"
SCREEN_CSS = REPO / "templates" / "styles" / "screen.css"
# WCAG 2.1 success criterion 1.4.3 (contrast, minimum) for text below 18 pt.
MIN_CONTRAST = 4.5

# https://html.spec.whatwg.org/#void-elements
VOID = frozenset(
    {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source"}
    | {"track", "wbr"}
)
# Elements whose start tag closes an open <p> (HTML spec, "p" element, tag omission).
CLOSES_P = frozenset(
    {"address", "article", "aside", "blockquote", "details", "div", "dl", "fieldset"}
    | {"figcaption", "figure", "footer", "form", "h1", "h2", "h3", "h4", "h5", "h6"}
    | {"header", "hgroup", "hr", "main", "menu", "nav", "ol", "p", "pre", "section"}
    | {"table", "ul"}
)
SCOPES = frozenset({"col", "row", "colgroup", "rowgroup"})
# Anything a browser would fetch from elsewhere: an absolute or scheme-relative URL.
EXTERNAL = re.compile(r"(?i)(?:https?:)?//[^/\s]")
# Inside an SVG figure: a reference that would be fetched (namespace and DTD identifiers
# such as http://www.w3.org/2000/svg are names, never fetched, and are allowed).
SVG_FETCH = re.compile(
    r"""(?ix)
    (?:\bhref|\bsrc)\s*=\s*["']\s*(?:https?:)?//
    | url\(\s*["']?\s*(?:https?:)?//
    | @import
    """
)


# --------------------------------------------------------------------------- strict HTML


@dataclass
class Node:
    """One element of the parsed page."""

    tag: str
    attrs: dict[str, str | None]
    line: int
    parent: Node | None = None
    children: list[Node] = field(default_factory=list)
    text: list[str] = field(default_factory=list)

    def iter(self) -> Iterator[Node]:
        yield self
        for child in self.children:
            yield from child.iter()

    def find_all(self, tag: str) -> list[Node]:
        return [n for n in self.iter() if n.tag == tag]

    def all_text(self) -> str:
        return "".join(self.text) + "".join(c.all_text() for c in self.children)


class StrictParser(HTMLParser):
    """Builds a tree and records every place where the markup relies on error recovery."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.root = Node("#document", {}, 0)
        self.stack: list[Node] = [self.root]
        self.problems: list[str] = []
        self.ids: dict[str, int] = {}
        self.doctype: str | None = None

    def handle_decl(self, decl: str) -> None:
        self.doctype = decl

    def _open(self, tag: str, attrs: list[tuple[str, str | None]]) -> Node:
        line = self.getpos()[0]
        names = [name for name, _ in attrs]
        for name in sorted({n for n in names if names.count(n) > 1}):
            self.problems.append(f"line {line}: <{tag}> repeats the attribute {name!r}")
        node = Node(tag, dict(attrs), line, parent=self.stack[-1])
        self.stack[-1].children.append(node)
        ident = node.attrs.get("id")
        if ident is not None:
            if ident in self.ids:
                self.problems.append(
                    f"line {line}: id {ident!r} already used on line {self.ids[ident]}"
                )
            self.ids.setdefault(ident, line)
        if tag in CLOSES_P and any(n.tag == "p" for n in self.stack[1:]):
            self.problems.append(f"line {line}: <{tag}> inside an open <p>")
        return node

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        node = self._open(tag, attrs)
        if tag not in VOID:
            self.stack.append(node)

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self._open(tag, attrs)
        if tag not in VOID:
            line = self.getpos()[0]
            self.problems.append(f"line {line}: <{tag}/> is not closed (the slash is ignored)")

    def handle_endtag(self, tag: str) -> None:
        line = self.getpos()[0]
        if tag in VOID:
            self.problems.append(f"line {line}: end tag </{tag}> of a void element")
            return
        if self.stack[-1].tag == tag:
            self.stack.pop()
            return
        open_tags = [n.tag for n in self.stack[1:]]
        if tag in open_tags:
            self.problems.append(
                f"line {line}: </{tag}> closes <{tag}> while <{self.stack[-1].tag}> "
                f"(line {self.stack[-1].line}) is still open"
            )
            while self.stack[-1].tag != tag:
                self.stack.pop()
            self.stack.pop()
        else:
            self.problems.append(f"line {line}: </{tag}> has no open <{tag}>")

    def handle_data(self, data: str) -> None:
        self.stack[-1].text.append(data)

    def close(self) -> None:
        super().close()
        for node in self.stack[1:]:
            self.problems.append(f"line {node.line}: <{node.tag}> is never closed")

    def dangling_references(self) -> list[str]:
        """In-page links and ARIA references whose target id does not exist."""
        out = []
        for node in self.root.iter():
            href = node.attrs.get("href")
            if href and href.startswith("#") and href[1:] not in self.ids:
                out.append(f"line {node.line}: href={href!r} points at no id")
            for name in ("aria-labelledby", "aria-describedby", "for"):
                value = node.attrs.get(name)
                for target in (value or "").split():
                    if target not in self.ids:
                        out.append(f"line {node.line}: {name}={target!r} points at no id")
        return out


def parse_strict(page: str) -> StrictParser:
    parser = StrictParser()
    parser.feed(page)
    parser.close()
    return parser


def where(node: Node) -> str:
    ident = node.attrs.get("id") or node.attrs.get("class") or ""
    return f"<{node.tag}> line {node.line}" + (f" ({ident})" if ident else "")


@pytest.fixture(scope="module")
def demo_html(tmp_path_factory: pytest.TempPathFactory) -> str:
    out = tmp_path_factory.mktemp("accessibility") / "bundle"
    api.run(api.load(DEMO_SPEC), output=out, command="reportkit demo bundle", pdf=False)
    return (out / "appendix.html").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def parsed(demo_html: str) -> StrictParser:
    return parse_strict(demo_html)


# ------------------------------------------------------------------- the strict parser


@pytest.mark.parametrize(
    ("snippet", "expected"),
    [
        ("<div><b>x</div></b>", "</div> closes <div> while <b>"),
        ("<p>one<div>block</div></p>", "<div> inside an open <p>"),
        ("<section><p>open</section>", "</section> closes <section> while <p>"),
        ("<div>never closed", "<div> is never closed"),
        ("<span>a</span></span>", "</span> has no open <span>"),
        ('<i id="a"></i><i id="a"></i>', "id 'a' already used"),
        ('<i class="a" class="b"></i>', "repeats the attribute 'class'"),
        ("<div/>", "<div/> is not closed"),
        ("<br></br>", "end tag </br> of a void element"),
    ],
)
def test_strict_parser_reports_recovered_markup(snippet: str, expected: str) -> None:
    # Each snippet is invalid HTML that a browser repairs silently (HTML spec, parsing).
    problems = parse_strict(snippet).problems
    assert any(expected in p for p in problems), problems


def test_strict_parser_accepts_valid_markup() -> None:
    page = (
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><title>t</title></head>'
        '<body><p>a<br>b <a href="#s">link</a></p><section id="s"><img alt="x" src="data:,">'
        "</section></body></html>"
    )
    parser = parse_strict(page)
    assert parser.problems == []
    assert parser.dangling_references() == []
    assert parse_strict('<a href="#nowhere">x</a>').dangling_references() != []


# ------------------------------------------------------------------------- the demo page


def test_page_parses_cleanly(parsed: StrictParser) -> None:
    assert parsed.doctype is not None and parsed.doctype.lower() == "doctype html"
    assert parsed.problems == []
    assert parsed.dangling_references() == []


def test_html_declares_its_language(parsed: StrictParser) -> None:
    # WCAG 2.1 SC 3.1.1: the page's language, as a BCP 47 tag
    (html_node,) = parsed.root.find_all("html")
    lang = html_node.attrs.get("lang") or ""
    assert re.fullmatch(r"[a-zA-Z]{2,3}(-[a-zA-Z0-9]{2,8})*", lang), lang


def test_tables_have_scoped_header_cells(parsed: StrictParser) -> None:
    # WCAG 2.1 SC 1.3.1 (technique H63: scope on th)
    tables = parsed.root.find_all("table")
    assert tables
    no_headers = [where(t) for t in tables if not t.find_all("th")]
    assert no_headers == []
    unscoped = [
        where(th)
        for t in tables
        for th in t.find_all("th")
        if (th.attrs.get("scope") or "") not in SCOPES
    ]
    assert unscoped == []


def test_tables_have_captions(parsed: StrictParser) -> None:
    # WCAG 2.1 technique H39: a caption names each data table for screen-reader users
    tables = parsed.root.find_all("table")
    uncaptioned = [
        where(t)
        for t in tables
        if not any(c.tag == "caption" and c.all_text().strip() for c in t.children)
    ]
    assert uncaptioned == []


def test_images_have_alt_text(parsed: StrictParser) -> None:
    # WCAG 2.1 SC 1.1.1: every figure image describes itself in words
    images = parsed.root.find_all("img")
    assert images
    assert [where(i) for i in images if not (i.attrs.get("alt") or "").strip()] == []


def test_figures_have_captions(parsed: StrictParser) -> None:
    figures = parsed.root.find_all("figure")
    assert figures
    uncaptioned = [
        where(f)
        for f in figures
        if not any(c.tag == "figcaption" and c.all_text().strip() for c in f.children)
    ]
    assert uncaptioned == []


def test_nothing_refers_outside_the_file(demo_html: str, parsed: StrictParser) -> None:
    found = []
    for node in parsed.root.iter():
        if node.tag in {"link", "iframe", "object", "embed"} or (
            node.tag == "script" and "src" in node.attrs
        ):
            found.append(f"{where(node)}: loads another file")
        for name, value in node.attrs.items():
            if value is None:
                continue
            if value.lower().startswith("data:"):
                svg = decoded_svg(value)
                if svg is not None and SVG_FETCH.search(svg):
                    found.append(f"{where(node)}: {name} embeds an SVG that fetches a URL")
            elif EXTERNAL.search(value):
                found.append(f"{where(node)}: {name}={value[:80]!r}")
    for node in parsed.root.find_all("style"):
        css = node.all_text()
        if re.search(r"(?i)url\(\s*[\"']?\s*(?:https?:)?//|@import", css):
            found.append(f"{where(node)}: the stylesheet loads a URL")
    assert found == []
    assert parsed.root.find_all("img"), "no image was checked"


def decoded_svg(uri: str) -> str | None:
    """The text of an SVG data: URI (base64 or percent-encoded); None for other types."""
    header, _, payload = uri.partition(",")
    if not header.lower().startswith("data:image/svg+xml"):
        return None
    if header.lower().endswith(";base64"):
        return base64.b64decode(payload).decode("utf-8")
    return urllib.parse.unquote(payload)


# ------------------------------------------------------------------- colours of screen.css

RGB = tuple[float, float, float]


def relative_luminance(rgb: RGB) -> float:
    """WCAG 2.1 relative luminance of an sRGB colour with channels in 0-255."""

    def linear(c: float) -> float:
        c = c / 255
        return c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4

    r, g, b = (linear(c) for c in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def contrast_ratio(a: RGB, b: RGB) -> float:
    """WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05), lighter over darker."""
    la, lb = sorted((relative_luminance(a), relative_luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


NAMED = {"white": "#ffffff", "black": "#000000"}
RGB_FUNCTION = r"rgba?\(\s*([\d.]+)[\s,]+([\d.]+)[\s,]+([\d.]+)\s*(?:[,/]\s*([\d.]+%?))?\)"
NO_COLOUR = {"inherit", "initial", "unset", "revert", "currentcolor", "none", "transparent"}


def parse_colour(value: str) -> RGB | None:
    """An opaque colour, None for keywords that set none; unreadable values raise."""
    v = NAMED.get(value.strip().lower(), value.strip().lower())
    if v in NO_COLOUR:
        return None
    m = re.fullmatch(r"#([0-9a-f]{3,4}|[0-9a-f]{6}|[0-9a-f]{8})", v)
    if m:
        digits = m.group(1)
        if len(digits) in (3, 4):
            digits = "".join(d * 2 for d in digits)
        if len(digits) == 8 and digits[6:] != "ff":
            raise ValueError(f"translucent colour {value!r}: give an opaque one")
        r, g, b = (float(int(digits[i : i + 2], 16)) for i in (0, 2, 4))
        return (r, g, b)
    m = re.fullmatch(RGB_FUNCTION, v)
    if m:
        alpha = m.group(4)
        if alpha is not None and float(alpha.rstrip("%")) not in (1.0, 100.0):
            raise ValueError(f"translucent colour {value!r}: give an opaque one")
        return (float(m.group(1)), float(m.group(2)), float(m.group(3)))
    raise ValueError(f"cannot read the colour {value!r}")


@dataclass(frozen=True)
class Rule:
    selector: str
    declarations: dict[str, str]


def css_rules(css: str) -> list[Rule]:
    """Style rules of a stylesheet, with those inside @media screen / all blocks; other
    at-rules (@page, print media) are left out because they do not style the screen."""
    css = re.sub(r"/\*.*?\*/", "", css, flags=re.DOTALL)
    rules: list[Rule] = []
    pos = 0
    while True:
        brace = css.find("{", pos)
        if brace < 0:
            break
        prelude = css[pos:brace].strip()
        depth, end = 1, brace + 1
        while depth:
            depth += {"{": 1, "}": -1}.get(css[end], 0)
            end += 1
        body = css[brace + 1 : end - 1]
        if prelude.startswith("@"):
            if re.match(r"@media\s+(screen|all)\b", prelude) and "print" not in prelude:
                rules += css_rules(body)
        else:
            decls = {}
            for item in body.split(";"):
                name, sep, value = item.partition(":")
                if sep:
                    decls[name.strip().lower()] = value.strip()
            rules.append(Rule(" ".join(prelude.split()), decls))
        pos = end
    return rules


def resolve_vars(value: str, custom: dict[str, str]) -> str:
    """Substitute var(--name, fallback) with the custom property's value."""

    def sub(m: re.Match[str]) -> str:
        name, fallback = m.group(1), m.group(2)
        if name in custom:
            return resolve_vars(custom[name], custom)
        if fallback is not None:
            return fallback.strip()
        raise ValueError(f"custom property {name} is used but never declared")

    return re.sub(r"var\(\s*(--[\w-]+)\s*(?:,\s*([^)]*))?\)", sub, value)


def background_colour(value: str) -> RGB | None:
    """The colour layer of a background / background-color value."""
    if "url(" in value or "gradient(" in value:
        raise ValueError(f"background {value!r} is an image; its contrast cannot be checked")
    tokens = re.findall(r"[\w#.%-]+\([^)]*\)|[^\s]+", value)
    colours = []
    for token in tokens:
        try:
            colour = parse_colour(token)
        except ValueError:
            continue
        colours.append((token, colour))
    if not colours:
        raise ValueError(f"no colour found in background {value!r}")
    return colours[-1][1]


@dataclass(frozen=True)
class ColourPair:
    text: str
    text_rgb: RGB
    text_selectors: tuple[str, ...]
    background: str
    background_rgb: RGB
    background_selectors: tuple[str, ...]

    @property
    def name(self) -> str:
        return f"{self.text} on {self.background}"


def colour_pairs(css: str) -> list[ColourPair]:
    """The (text, background) pairs to check; see the module docstring for which."""
    rules = css_rules(css)
    custom = {
        name: value for r in rules for name, value in r.declarations.items() if name[:2] == "--"
    }
    page_bg, own, free, boxes = None, [], [], []
    for rule in rules:
        d = {k: resolve_vars(v, custom) for k, v in rule.declarations.items()}
        text = parse_colour(d["color"]) if "color" in d else None
        bg_value = d.get("background-color", d.get("background"))
        bg = background_colour(bg_value) if bg_value is not None else None
        page = rule.selector in {"html", "body", ":root"}
        if page and bg is not None:
            page_bg = (bg_value, bg, rule.selector)
        elif text is not None and bg is not None:
            own.append((d["color"], text, rule.selector, bg_value, bg, rule.selector))
        elif bg is not None:
            boxes.append((bg_value, bg, rule.selector))
        if text is not None and (bg is None or page):
            free.append((d["color"], text, rule.selector))
    assert page_bg is not None, "screen.css sets no page background on html, body or :root"
    grouped: dict[tuple[str, str], tuple[RGB, RGB, set[str], set[str]]] = {}

    def add(t: str, trgb: RGB, tsel: str, b: str, brgb: RGB, bsel: str) -> None:
        key = (t.lower(), b.lower())
        entry = grouped.setdefault(key, (trgb, brgb, set(), set()))
        entry[2].add(tsel)
        entry[3].add(bsel)

    for item in own:
        add(*item)
    for t, trgb, tsel in free:
        for b, brgb, bsel in [page_bg, *boxes]:
            add(t, trgb, tsel, b, brgb, bsel)
    return [
        ColourPair(t, trgb, tuple(sorted(ts)), b, brgb, tuple(sorted(bs)))
        for (t, b), (trgb, brgb, ts, bs) in sorted(grouped.items())
    ]


def screen_pairs() -> tuple[list[ColourPair], str | None]:
    """The pairs of screen.css, or the reason they cannot be read (reported by a test)."""
    try:
        return colour_pairs(SCREEN_CSS.read_text(encoding="utf-8")), None
    except (ValueError, AssertionError) as err:
        return [], str(err)


SCREEN_PAIRS, SCREEN_CSS_ERROR = screen_pairs()


def test_contrast_formula_on_known_pairs() -> None:
    # Black on white is 21:1 by the WCAG 2.1 definition ((1 + 0.05) / (0 + 0.05)).
    assert contrast_ratio((0, 0, 0), (255, 255, 255)) == pytest.approx(21.0)
    # #767676 on white is 4.54:1, the lightest grey that passes 4.5:1 (from memory).
    assert contrast_ratio((118, 118, 118), (255, 255, 255)) == pytest.approx(4.54, abs=0.01)
    assert contrast_ratio((119, 119, 119), (255, 255, 255)) < MIN_CONTRAST


def test_css_reader_finds_pairs_and_custom_properties() -> None:
    css = """
    :root { --ink: #222222; --paper: #ffffff; }
    html { color: var(--ink); background: var(--paper); }
    .box { background: #eeeeee; }
    .badge { color: rgb(255, 255, 255); background-color: #333; }
    @media print { .pale { color: #dddddd; } }
    """
    names = {p.name: p for p in colour_pairs(css)}
    assert set(names) == {
        "#222222 on #ffffff",
        "#222222 on #eeeeee",
        "rgb(255, 255, 255) on #333",
    }
    assert names["rgb(255, 255, 255) on #333"].background_rgb == (51.0, 51.0, 51.0)
    assert names["#222222 on #eeeeee"].text_rgb == (34.0, 34.0, 34.0)
    assert names["#222222 on #eeeeee"].background_selectors == (".box",)
    with pytest.raises(ValueError, match="cannot read"):
        colour_pairs("html { background: #fff; } .x { color: oklch(0.5 0.1 30); }")


def test_screen_css_has_pairs_to_check() -> None:
    assert SCREEN_CSS_ERROR is None, f"templates/styles/screen.css: {SCREEN_CSS_ERROR}"
    assert len(SCREEN_PAIRS) >= 4
    assert any(p.background_selectors == ("html",) for p in SCREEN_PAIRS)


@pytest.mark.parametrize("pair", SCREEN_PAIRS, ids=[p.name for p in SCREEN_PAIRS])
def test_screen_css_text_contrast(pair: ColourPair) -> None:
    ratio = contrast_ratio(pair.text_rgb, pair.background_rgb)
    assert ratio >= MIN_CONTRAST, (
        f"{pair.name}: {ratio:.2f}:1 < {MIN_CONTRAST}:1; text from "
        f"{', '.join(pair.text_selectors)}; background from {', '.join(pair.background_selectors)}"
    )
