"""Mechanical checks of a printed report, read back from the PDF with poppler's command-line tools
(pdfinfo, pdftotext, pdfimages), as a person would find the pages."""

from __future__ import annotations

import re
import subprocess
from html.parser import HTMLParser

# PDF points per millimetre (1 pt = 1/72 in; 25.4 mm per inch: ISO 80000-1 definitions)
PT_PER_MM = 72 / 25.4
PAPER_MM = {"a4": (210.0, 297.0), "letter": (215.9, 279.4)}  # ISO 216 A4; ANSI Letter, 8.5 x 11 in


def _run(*cmd: str) -> str:
    return subprocess.run(cmd, check=True, capture_output=True, text=True, timeout=120).stdout


def page_info(pdf) -> tuple[int, float, float]:
    """(pages, width pt, height pt) of the first page."""
    out = _run("pdfinfo", str(pdf))
    pages = int(re.search(r"^Pages:\s+(\d+)", out, re.M).group(1))
    w, h = re.search(r"^Page size:\s+([\d.]+) x ([\d.]+) pts", out, re.M).groups()
    return pages, float(w), float(h)


def words_beyond(pdf, right_pt: float) -> list[tuple[int, str, float]]:
    """Every word whose right edge lies beyond `right_pt` (page, word, x_max)."""
    out = _run("pdftotext", "-bbox", str(pdf), "-")
    bad, page = [], 0
    for line in out.splitlines():
        if "<page " in line:
            page += 1
        m = re.search(r'<word xMin="[\d.]+" yMin="[\d.]+" xMax="([\d.]+)" yMax="[\d.]+">(.*)</word>', line)
        if m and float(m.group(1)) > right_pt:
            bad.append((page, m.group(2), float(m.group(1))))
    return bad


def page_lines(pdf) -> list[list[str]]:
    """Each page's text lines in reading layout."""
    pages = _run("pdftotext", "-layout", str(pdf), "-").split("\f")
    return [[" ".join(ln.split()) for ln in p.splitlines() if ln.strip()] for p in pages if p.strip()]


def image_pages(pdf) -> list[int]:
    """The page of every image, in the order drawn (soft masks left out)."""
    rows = _run("pdfimages", "-list", str(pdf)).splitlines()[2:]
    return [int(r.split()[0]) for r in rows if r.split()[2] == "image"]


class _Follow(HTMLParser):
    """For every h2 and h3: its text and what comes first after it (an image by its index among the
    page's images, or the first words of text)."""

    def __init__(self) -> None:
        super().__init__()
        self.out: list[tuple[str, str, object]] = []
        self.images = 0
        self.heading: list[str] | None = None
        self.pending: str | None = None
        self.skip = 0

    def handle_starttag(self, tag, attrs):
        if tag in ("style", "title"):
            self.skip += 1
        elif tag in ("h2", "h3"):
            self.heading = []
        elif tag == "img":
            if self.pending is not None:
                self.out.append((self.pending, "image", self.images))
                self.pending = None
            self.images += 1

    def handle_endtag(self, tag):
        if tag in ("style", "title"):
            self.skip -= 1
        elif tag in ("h2", "h3") and self.heading is not None:
            self.pending = " ".join("".join(self.heading).split())
            self.heading = None

    def handle_data(self, data):
        if self.skip:
            return
        if self.heading is not None:
            self.heading.append(data)
        elif self.pending is not None and data.strip():
            self.out.append((self.pending, "text", " ".join(data.split()[:3])))
            self.pending = None


def heading_followers(html: str) -> tuple[list[tuple[str, str, object]], int]:
    p = _Follow()
    p.feed(html)
    return p.out, p.images


def headings_apart(pdf, html: str) -> list[str]:
    """Headings printed on a different page from the first thing after them: each heading is found as
    a line of its own, in document order; what follows must be on that page (text: on a later line
    of it; an image: drawn on it)."""
    followers, n_images = heading_followers(html)
    pages = page_lines(pdf)
    img_pages = image_pages(pdf)
    assert len(img_pages) == n_images, f"{len(img_pages)} images in the PDF, {n_images} in the page"
    problems, at = [], 0
    for heading, kind, what in followers:
        where = next(
            ((p, i) for p in range(at, len(pages)) for i, ln in enumerate(pages[p]) if ln == heading), None
        )
        if where is None:
            problems.append(f"{heading!r}: not found as a line of its own")
            continue
        p, i = where
        at = p
        if kind == "image":
            if img_pages[what] != p + 1:
                problems.append(f"{heading!r} on page {p + 1}, its figure on page {img_pages[what]}")
        elif not any(str(what) in ln for ln in pages[p][i + 1 :]):
            problems.append(f"{heading!r} on page {p + 1}, {what!r} not after it on that page")
    return problems
