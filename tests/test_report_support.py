"""Support for the report/compare tests (no tests here): a strict HTML well-formedness
check and a headless-Chromium loader (flags as in the project's pitfalls notes)."""
from __future__ import annotations

import os
import pathlib
import shutil
import tempfile
from html.parser import HTMLParser

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}
#: SVG elements written as <x/> are self-closed; HTML ones may not be.
SVG_SELF_CLOSING = {"line", "path", "circle", "rect", "polygon", "polyline", "ellipse"}

CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"


class StrictHTML(HTMLParser):
    """Fails on unbalanced or mis-nested tags, stray end tags, duplicate ids,
    a missing doctype; collects the URLs of scripts and stylesheets."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.ids: set[str] = set()
        self.doctype = None
        self.resource_urls: list[str] = []
        self.tags: list[tuple[str, dict]] = []

    def handle_decl(self, decl):
        self.doctype = decl

    def _attrs(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if "id" in a:
            if a["id"] in self.ids:
                self.errors.append(f"duplicate id {a['id']!r}")
            self.ids.add(a["id"])
        if tag == "script" and a.get("src"):
            self.resource_urls.append(a["src"])
        if tag == "link" and a.get("href"):
            self.resource_urls.append(a["href"])
        return a

    def handle_starttag(self, tag, attrs):
        self._attrs(tag, attrs)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self._attrs(tag, attrs)
        if tag not in VOID and tag not in SVG_SELF_CLOSING:
            self.errors.append(f"<{tag}/> self-closed")

    def handle_endtag(self, tag):
        if tag in VOID:
            self.errors.append(f"end tag for void element </{tag}>")
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
            return
        self.stack.pop()


def check_html(text: str) -> StrictHTML:
    """Parse ``text``; raise AssertionError listing the problems."""
    p = StrictHTML()
    p.feed(text)
    p.close()
    problems = list(p.errors)
    if p.stack:
        problems.append(f"unclosed: {p.stack}")
    if (p.doctype or "").lower() != "doctype html":
        problems.append(f"doctype is {p.doctype!r}")
    assert not problems, "; ".join(problems[:10])
    return p


def chromium_driver(width=1200, height=2400):
    """A headless Chromium webdriver with a fresh profile, or None if absent."""
    if not (os.path.exists(CHROMIUM) and os.path.exists(CHROMEDRIVER)):
        return None, None
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    profile = tempfile.mkdtemp(prefix="fp-chromium-")
    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync",
                 f"--user-data-dir={profile}", f"--window-size={width},{height}"):
        opts.add_argument(flag)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=opts)
    return driver, profile


def close_driver(driver, profile):
    if driver is not None:
        driver.quit()
    if profile:
        shutil.rmtree(profile, ignore_errors=True)


def artifacts_dir() -> pathlib.Path:
    d = pathlib.Path(__file__).resolve().parent.parent / "test-artifacts"
    d.mkdir(exist_ok=True)
    return d
