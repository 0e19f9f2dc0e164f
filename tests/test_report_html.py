"""Tests for advisor.report.html and advisor.report.charts: the self-contained HTML report.

The page is parsed with the standard library's ``html.parser`` (an HTML tokenizer that knows
nothing of this project) and checked as text. Numbers shown are compared with the
``AuditResult`` they come from, and where possible with an independent reading of the sample
files: row counts with pandas, file hashes with ``hashlib``.
"""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import re
from datetime import date, timedelta
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pytest

import advisor
from advisor.config import AuditConfig
from advisor.report import charts
from advisor.report.html import SECTION_IDS, esc, render_html

REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "sample_logs"
CHART_IDS = ("chart-lorenz", "chart-support", "chart-weekly", "chart-learning-curve")

XSS_TITLE = "<script>alert(1)</script>"
XSS_CATEGORY = '"><img src=x onerror=alert(1)>'
XSS_ITEM = 'x"<i>1'
#: A log file name that is legal on POSIX and would break out of an attribute or open a tag.
XSS_FILE = 'plays"<b>.csv'


class Page(HTMLParser):
    """Tags, attributes, ids and the text of each section, as a browser's tokenizer sees them."""

    def __init__(self, text: str):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.ids: list[str] = []
        self.text: dict[str | None, list[str]] = {}
        self.section: str | None = None
        self.by_field: dict[str, str] = {}
        self._field: str | None = None
        self.feed(text)
        self.close()

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if "id" in a:
            self.ids.append(a["id"])
        if tag == "section":
            self.section = a.get("id")
        if "data-field" in a:
            self._field = a["data-field"]

    def handle_startendtag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if "id" in a:
            self.ids.append(a["id"])

    def handle_endtag(self, tag):
        if tag == "section":
            self.section = None
        self._field = None

    def handle_data(self, data):
        self.text.setdefault(self.section, []).append(data)
        if self._field:
            self.by_field[self._field] = self.by_field.get(self._field, "") + data

    def section_text(self, sid: str) -> str:
        return " ".join(" ".join(self.text.get(sid, [])).split())


def write_hostile_inputs(folder: Path) -> tuple[Path, Path]:
    """A tiny log and catalogue whose title, category, item id and file name are markup.

    40 users each take 6 of 12 ordinary items; one user takes the hostile item, so it is cold
    (one user) and, added last, heads the editorial list.
    """
    logs = folder / "logs"
    logs.mkdir(parents=True)
    items = [f"i{j:02d}" for j in range(12)]
    catalog = folder / "catalog.csv"
    with open(catalog, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["item_id", "title", "categories", "added_at"])
        for j, it in enumerate(items):
            w.writerow([it, f"Item {j}", "soups" if j % 2 else "bread", "2026-01-01"])
        w.writerow([XSS_ITEM, XSS_TITLE, XSS_CATEGORY, "2026-03-01"])
    rows = [(f"u{u:03d}", items[(u * 5 + k * k) % len(items)],
             f"2026-02-{1 + (u + k) % 27:02d}T10:{k:02d}:00Z", "play")
            for u in range(40) for k in range(6)]
    rows.append(("u000", XSS_ITEM, "2026-03-02T10:00:00Z", "play"))
    with open(logs / XSS_FILE, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["user_id", "item_id", "timestamp", "event_type"])
        w.writerows(rows)
    return logs, catalog


def hostile_report(folder: Path) -> str:
    """The HTML report of the hostile inputs (backtest off: the log is too small anyway)."""
    logs, catalog = write_hostile_inputs(folder)
    result = advisor.audit(logs, catalog=catalog, config=AuditConfig(seed=1, backtest=False))
    return render_html(result)


@pytest.fixture(scope="module")
def result() -> advisor.AuditResult:
    """The sample scenario audited once, with the backtest, seed 1."""
    return advisor.audit(SAMPLE / "events", catalog=SAMPLE / "catalog.csv",
                         config=AuditConfig(seed=1))


@pytest.fixture(scope="module")
def html(result) -> str:
    """The report of the sample audit."""
    return render_html(result)


@pytest.fixture(scope="module")
def page(html) -> Page:
    """The parsed report of the sample audit."""
    return Page(html)


@pytest.fixture(scope="module")
def hostile(tmp_path_factory) -> str:
    """The report of the hostile inputs."""
    return hostile_report(tmp_path_factory.mktemp("hostile"))


# ------------------------------------------------------------------------------ structure

def test_every_section_id_is_present_once(page):
    """Each section id (except the history-only trend) appears exactly once."""
    for sid in SECTION_IDS:
        if sid == "trend":
            assert sid not in page.ids
        else:
            assert page.ids.count(sid) == 1, sid


def test_every_chart_is_an_inline_svg(page):
    """Each chart figure holds one inline SVG (no image file, no object, no iframe)."""
    tags = [t for t, _ in page.tags]
    assert tags.count("svg") == len(CHART_IDS)
    for cid in CHART_IDS:
        assert cid in page.ids
    assert not {"img", "object", "iframe", "embed", "link"} & set(tags)


def test_ids_are_unique_across_the_page(page):
    """Several inline SVGs in one page do not share clip-path or glyph ids."""
    dupes = {i for i in page.ids if page.ids.count(i) > 1}
    assert not dupes


def test_every_internal_reference_points_at_an_id_on_the_page(page):
    """Links and SVG references are all '#id' and resolve inside the page (self-contained)."""
    ids = set(page.ids)
    for _, attrs in page.tags:
        for key in ("href", "xlink:href"):
            if key in attrs:
                assert attrs[key].startswith("#"), attrs[key]
                assert attrs[key][1:] in ids, attrs[key]
        for url in re.findall(r"url\(([^)]*)\)", attrs.get("clip-path", "")):
            assert url.startswith("#") and url[1:] in ids, url
        assert "src" not in attrs


def test_page_has_no_script_and_a_strict_content_security_policy(html, page):
    """No script element, no event-handler attribute, and a CSP that forbids loading anything."""
    assert "<script" not in html.lower()
    for tag, attrs in page.tags:
        assert not [a for a in attrs if a.lower().startswith("on")], (tag, attrs)
    csp = [a["content"] for t, a in page.tags
           if t == "meta" and a.get("http-equiv") == "Content-Security-Policy"]
    assert csp == ["default-src 'none'; style-src 'unsafe-inline'; img-src data:"]


# ------------------------------------------------------------------------------ content

def test_headline_states_the_decision(result, page):
    """The headline names the highest ready tier, the go / no-go and the next tier."""
    d = result.decision
    names = {t.id: t.name for t in d.tiers}
    assert page.by_field["headline-tier"] == (names[d.headline_tier] if d.headline_tier
                                              else "No tier yet")
    assert page.by_field["personalised"] == ("GO" if d.personalised_go else "NO-GO")
    text = page.section_text("headline")
    if d.next_tier:
        assert names[d.next_tier] in text
    assert f"seed {result.run.seed}" in text
    assert result.run.as_of[:10] in text


def test_row_counts_match_an_independent_reading_of_the_logs(page):
    """Rows read equal the data rows pandas finds in the sample files (README: 99,543)."""
    rows = sum(len(pd.read_csv(f, dtype=str)) for f in sorted((SAMPLE / "events").glob("*.gz")))
    assert rows == 99_543  # sample_logs/README.md, "99,543 rows"
    assert f"{rows:,} rows read" in page.section_text("quality")


def test_input_fingerprint_shows_hashes_computed_with_hashlib(page):
    """Each input file appears with the first 12 hex digits of its SHA-256 (hashlib)."""
    text = page.section_text("inputs")
    files = sorted((SAMPLE / "events").glob("*.gz")) + [SAMPLE / "catalog.csv"]
    for f in files:
        assert f.name in text
        assert hashlib.sha256(f.read_bytes()).hexdigest()[:12] in text


def test_numbers_shown_match_the_result(result, page):
    """Spot checks: volume, tier rule values, cold counts, candidate NDCG and the curve."""
    v = result.profile.volume
    assert f"{v.interactions:,}" in page.section_text("headline")
    assert f"{v.users:,}" in page.section_text("headline")
    tiers = page.section_text("tiers")
    for verdict in result.decision.tiers:
        assert verdict.name in tiers
        for res in verdict.results:
            assert res.rule.id in tiers
    it = result.cold_items
    assert f"{it.cold:,} of {it.catalogue_items:,} catalogue items" in page.section_text(
        "cold-items")
    u = result.cold_users
    assert f"{u.active_users:,}" in page.section_text("cold-users")
    ev = page.section_text("evidence")
    for c in result.evidence.candidates:
        assert f"{c.ndcg:.3f}" in ev
    for p in result.evidence.learning_curve.points:
        assert f"{p.train_users:,}" in ev and f"{p.lift:+.3f}" in ev
    assert f"Gini {result.profile.long_tail.gini:.3f}" in page.section_text("charts")


def test_editorial_list_shows_the_first_fifty_in_order_and_points_to_the_csv(result, html):
    """The editorial table has min(50, n) rows in the placement order, and names the CSV."""
    pl = result.cold_items.placement
    body = re.search(r'<section id="editorial">.*?<tbody>(.*?)</tbody>', html, re.S).group(1)
    rows = re.findall(r"<tr>(.*?)</tr>", body, re.S)
    assert len(rows) == min(50, len(pl))
    shown = [re.findall(r"<td[^>]*>(.*?)</td>", r, re.S)[1] for r in rows]
    assert shown == [esc(x) for x in pl["item"].head(50)]
    assert "editorial_placement.csv" in Page(html).section_text("editorial")


def test_every_quality_issue_is_listed_with_its_file_and_line(result, page):
    """All quality issues appear (not only the first eight), each with where it was found."""
    text = page.section_text("quality")
    for issue in result.quality.issues:
        assert issue.code.replace("_", " ") in text
        if issue.first_file:
            assert f"{issue.first_file} line {issue.first_line}" in text


def test_rendering_is_deterministic(result, html):
    """The same audit renders to the same bytes (fixed SVG hash salt, no timestamps added)."""
    assert render_html(result) == html


# ------------------------------------------------------------------------------ history

def test_history_and_forecast_add_a_trend_section_and_curve_markers(result):
    """A history adds the trend section; a forecast's user projections mark the curve."""
    from advisor.history.entry import entry_from_result
    from advisor.history.forecast import forecast_readiness

    base = entry_from_result(result)
    entries = []
    for k, users in enumerate((1000, 1300, 1700, 2200, 2800, 3600)):
        m = dict(base.metrics, **{"volume.users": float(users),
                                  "volume.interactions": float(users * 23)})
        entries.append(dataclasses.replace(
            base, as_of=f"{date(2026, 10, 4) + timedelta(weeks=k)}T00:00:00+00:00",
            users=float(users),
            interactions=float(users * 23), metrics=m))
    fc = forecast_readiness(entries)
    assert fc.users is not None and fc.users.projections  # growing by construction
    page = Page(render_html(result, history=entries, forecast=fc))
    assert page.ids.count("trend") == 1 and "chart-history" in page.ids
    text = page.section_text("trend")
    assert "2026-10-04" in text and "2026-11-08" in text and "3,600" in text
    assert "+30%" in text  # 1000 -> 1300 users, worked by hand
    assert "Vertical lines" in page.section_text("evidence")


def test_history_without_forecast_still_renders(result):
    """A history with fewer audits than a forecast needs gives the table and no forecast."""
    from advisor.history.entry import entry_from_result

    page = Page(render_html(result, history=[entry_from_result(result).to_dict()]))
    assert "trend" in page.ids
    assert "chart-history" not in page.ids  # one audit: nothing to draw


# ------------------------------------------------------------------------------ safety

def test_hostile_catalogue_and_file_name_show_as_text(hostile):
    """Title, category, item id and file name with markup are shown as text, never as tags."""
    assert "<script" not in hostile.lower()
    p = Page(hostile)
    tags = {t for t, _ in p.tags}
    assert "img" not in tags and "i" not in tags and "b" not in tags
    for _, attrs in p.tags:
        assert not [a for a in attrs if a.lower().startswith("on")]
    assert XSS_TITLE in p.section_text("editorial")
    assert XSS_ITEM in p.section_text("editorial")
    assert XSS_CATEGORY in p.section_text("charts")
    assert XSS_FILE in p.section_text("inputs")
    assert esc(XSS_TITLE) in hostile  # escaped with html.escape(quote=True)
    assert esc(XSS_CATEGORY) in hostile


def test_chart_text_from_data_is_drawn_literally():
    """A candidate name or marker label with '$', '<' and quotes yields inert SVG."""
    svg = charts.learning_curve_svg([100, 200], [0.01, 0.02], [0.0, 0.01], [0.02, 0.03],
                                    candidate='$x$ <script>"', target_lift=0.01,
                                    markers=[('</svg><script>', 300, 250, 350)])
    assert svg.startswith("<svg") and svg.endswith("</svg>")
    assert "<script" not in svg.lower() and "<!--" not in svg
    assert svg.count("<svg") == 1


def test_support_bins_add_up_to_the_catalogue():
    """Support bins come from the "at least m users" counts and sum to the catalogue."""
    # 100 items; at least 1 / 5 / 10 users: 90 / 40 / 15 -> bins 10, 50, 25, 15 (by hand)
    labels, counts, lows = charts.support_bins([1, 5, 10], [90, 40, 15], 100)
    assert labels == ["0", "1-4", "5-9", "10+"]
    assert counts == [10, 50, 25, 15] and sum(counts) == 100
    assert lows == [0, 1, 5, 10]


def test_support_bins_of_the_sample_match_the_readme(result):
    """The sample's first bin (items nobody played) is the README's 17 never-played classes."""
    s = result.profile.support
    _, counts, _ = charts.support_bins(s.levels, s.items_at_least,
                                       result.profile.volume.catalogue_items)
    assert counts[0] == 17  # sample_logs/README.md: "17 were never played"
    assert sum(counts) == result.profile.volume.catalogue_items
