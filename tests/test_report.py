"""Rendering the documents: structure (parsed HTML and Markdown tokens), escaping, and what is sent out."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from pathlib import Path

import pytest
from markdown_it import MarkdownIt

from report_study import (
    AGE_MAX,
    AGE_MIN,
    BP_LABEL,
    MEMBER_ID_VALUE,
    SECRET_LEVEL,
    build_in_store,
)
from studylog import report
from studylog.store.session import locate, transaction


class Page(HTMLParser):
    """Every start tag with its attributes, the text, and the heading texts of an HTML document."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []
        self.headings: list[tuple[str, str]] = []
        self._heading: str | None = None
        self._style = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))
        if tag in ("h1", "h2", "h3", "h4", "h5"):
            self._heading = tag
            self.headings.append((tag, ""))
        self._style = tag == "style"

    def handle_endtag(self, tag: str) -> None:
        if tag == self._heading:
            self._heading = None
        if tag == "style":
            self._style = False

    def handle_data(self, data: str) -> None:
        if self._style:
            return
        self.text.append(data)
        if self._heading is not None:
            level, text = self.headings[-1]
            self.headings[-1] = (level, text + data)

    @property
    def all_text(self) -> str:
        return "".join(self.text)


def parse(html: str) -> Page:
    page = Page()
    page.feed(html)
    page.close()
    return page


@pytest.fixture
def built(study: Path):  # type: ignore[no-untyped-def]
    return build_in_store()


def render(document: str, fmt: str, **options) -> str:  # type: ignore[no-untyped-def]
    with transaction(locate(), write=False) as session:
        return report.render(session, document, fmt=fmt, **options)


@pytest.mark.parametrize("document", list(report.DOCUMENTS))
def test_every_html_document_is_self_contained_and_escaped(built, document: str) -> None:  # type: ignore[no-untyped-def]
    html = render(document, "html")
    page = parse(html)
    tags = [t for t, _ in page.tags]
    # nothing is fetched from outside and nothing runs: no scripts, no links, no images, no iframes
    assert "script" not in tags and "img" not in tags and "link" not in tags and "iframe" not in tags
    for _, attrs in page.tags:
        assert not any(name.startswith("on") for name in attrs), attrs
        # nothing is loaded from anywhere; a link in a description stays a link (never javascript:)
        assert "src" not in attrs, attrs
        assert not (attrs.get("href") or "").startswith("javascript:"), attrs
    assert tags.count("style") == 1 and "@media print" in html and "@page" in html
    assert page.headings[0] == ("h1", "Clinic readmission study")
    # the caution about personal data closes every document
    assert "apply them before you share this document" in page.all_text.split("Generated")[-1]
    assert tags[-1] == "p" and "footer" in tags


def test_dictionary_html_structure(built) -> None:  # type: ignore[no-untyped-def]
    page = parse(render("dictionary", "html"))
    headings = [text for level, text in page.headings if level == "h3"]
    assert headings == ["Table members", "Table visits"]
    groups = [text for level, text in page.headings if level == "h4"]
    visits = groups[groups.index("Cross-field rules"):]
    # variables grouped by role in a fixed order, the target first
    assert visits.index("Target") < visits.index("Inputs") < visits.index("Identifiers") \
        < visits.index("Time")
    # each variable a heading below its group's
    variables = [text for level, text in page.headings if level == "h5"]
    assert "systolic_bp " + BP_LABEL in variables and "systolic_bp " + BP_LABEL not in groups
    text = page.all_text
    assert "agreed-v1" in text and "1 recorded change since that version" in text
    assert "member_id → members.member_id" in text
    assert "maximum changed on 2026-03-03 by analyst: the registry accepts ages up to 120" in text
    assert "confirmed by data owner on 2026-03-03" in text
    # one inline SVG chart per profiled variable that may show values: age, sex, systolic_bp,
    # readmitted (not member_id, income, diagnosis; discharged has no histogram)
    svgs = [attrs for tag, attrs in page.tags if tag == "svg"]
    assert len(svgs) == 4
    assert all(a.get("xmlns") == "http://www.w3.org/2000/svg" for a in svgs)


def test_hostile_description_shows_as_text_in_html(built) -> None:  # type: ignore[no-untyped-def]
    html = render("dictionary", "html")
    page = parse(html)
    assert "<script>alert('x')</script>" in page.all_text
    assert "<img src=x onerror=alert(1)>" in page.all_text
    assert '<div onclick="steal()">raw block</div>' in page.all_text
    assert "&lt;script&gt;" in html and "<script" not in html
    assert not any(tag == "div" and "onclick" in attrs for tag, attrs in page.tags)
    # the Markdown image is not turned into an <img> that would be fetched (at most a plain link)
    assert not any(tag == "img" or "src" in attrs for tag, attrs in page.tags)


def _html_tokens(markdown: str) -> list[str]:
    """Raw HTML a Markdown viewer WOULD pass through (markdown-it with html enabled, as most do)."""
    tokens = MarkdownIt("commonmark").parse(markdown)
    found = []
    for token in tokens:
        if token.type == "html_block":
            found.append(token.content)
        for child in token.children or []:
            if child.type in ("html_inline", "image"):
                found.append(child.content or child.attrGet("src") or "")
    return found


@pytest.mark.parametrize("document", list(report.DOCUMENTS))
def test_markdown_passes_no_raw_html_or_images(built, document: str) -> None:  # type: ignore[no-untyped-def]
    text = render(document, "md")
    assert _html_tokens(text) == []
    rendered = MarkdownIt("commonmark").render(text)
    assert "<script" not in rendered
    assert "<img" not in rendered and "<div onclick" not in rendered
    assert text.rstrip().endswith("apply them before you share this document.*")


def test_markdown_structure_of_the_writeup(built) -> None:  # type: ignore[no-untyped-def]
    text = render("writeup", "md")
    tokens = MarkdownIt("commonmark").enable("table").parse(text)
    headings = [tokens[i + 1].content for i, t in enumerate(tokens) if t.type == "heading_open"
                and t.tag == "h2"]
    # the open questions are told once, as the open limitations of the validity part
    assert headings == ["Methods", "Threats to validity", "Conclusions", "Data dictionary"]
    assert text.count("Is -99 in income a refusal?") == 1
    tables = [t for t in tokens if t.type == "table_open"]
    assert len(tables) >= 10  # findings, record flow, appendix, questions, one per variable...
    # the record flow table: received 1,250; removed 40 and <5; analysed 1,250 - 43
    flow_start = text.index("| Received |")
    flow = text[flow_start:text.index("| **Analysed** |", flow_start) + 40]
    assert "| Received | 1,250 |" in flow and "−40" in flow and "−<5" in flow
    assert "**1,207**" in flow


@pytest.mark.parametrize("fmt", ["md", "html"])
def test_masked_values_and_small_counts_stay_masked(built, fmt: str) -> None:  # type: ignore[no-untyped-def]
    text = render("writeup", fmt)
    # values of a sensitive variable, identifier values, and the extremes of a quasi-identifier
    assert SECRET_LEVEL not in text
    assert MEMBER_ID_VALUE not in text
    assert "987123" not in text and "987,123" not in text and "4321" not in text and "4,321" not in text
    assert f">{AGE_MIN}<" not in text and f">{AGE_MAX}<" not in text
    assert "min 17" not in text and "max 103" not in text
    # counts from 1 to 4 are "<5": sex missing 2, finding count 3, records vanished 2, removed 3
    assert "<5" in text or "&lt;5" in text
    for small in ("missing in 2 ", " 2 missing", "3 rows", "2 vanished", "−3 "):
        assert small not in text
    # the private working note is not a document's content
    assert "Mr Example" not in text


def test_min_cell_threshold_moves(built) -> None:  # type: ignore[no-untyped-def]
    text = render("methods", "md", min_cell=11)
    assert "<11" in text and "| 10 |" not in text
    # with a threshold of 1 nothing is withheld as small
    plain = render("methods", "md", min_cell=1)
    assert "<1" not in plain and "−3" in plain


def test_methods_in_order_with_decision_refs_and_appendix(built) -> None:  # type: ignore[no-untyped-def]
    ids = built.ids
    text = render("methods", "md")
    order = ["### Data and its dictionary", "### Data received and checked", "### Record flow",
             "### Cleaning and recoding", "### Missing data", "### Outliers",
             "### Sampling, split and validation design", "### Modelling",
             "### Pre-specified and post-hoc decisions", "### Statistical definitions", "### Software",
             "### Appendix: decisions not in force"]
    positions = [text.index(h) for h in order]
    assert positions == sorted(positions)
    body, appendix = text.split("### Appendix: decisions not in force")
    # superseded, reverted and proposed decisions only in the appendix
    for key in ("d6", "d8", "d9"):
        assert f"[D{ids[key]}]" not in body and f"D{ids[key]}" in appendix
    assert f"superseded by D{ids['d7']}" in appendix and "the model does not need it" in appendix
    assert f"[D{ids['d7']}; post hoc]" in body and f"[D{ids['d1']}]" in body
    assert "missing at random given the observed data (MAR)" in body
    assert "Random seed: 20260301." in body
    assert "commit `0123456789ab`" in body and "commit `fedcba987654` (D" in body
    assert "Carried out in `prep/clean.py:12`, commit `0123456789ab`." in body
    assert "fixed on 2026-03-10" in body and "5 were taken before that and 2 after it" in body
    import importlib.metadata
    import platform

    # software versions as the installed distributions report them
    assert f"Python {platform.python_version()}" in body
    assert f"pyarrow {importlib.metadata.version('pyarrow')}" in body


def test_validity_conclusions_and_questions(built) -> None:  # type: ignore[no-untyped-def]
    validity = render("validity", "md")
    sections = ["### Internal validity", "### External validity", "### Construct validity",
                "### Statistical conclusion validity", "### Open limitations"]
    assert [validity.index(s) for s in sections] == sorted(validity.index(s) for s in sections)
    assert "Severity high; status open. Mitigation: sensitivity analysis under MNAR." in validity
    assert "Is -99 in income a refusal?" in validity and "Are ages above 100 real?" not in validity
    conclusions = render("conclusions", "md")
    bp = conclusions.index("Readmission rises")
    income = conclusions.index("Household income shows")
    assert "Triage pressure may not reflect" in conclusions[bp:income]
    assert "Income may be missing not at random" in conclusions[income:]
    assert "A single clinic" in conclusions.split("as a whole")[1]
    assert "- Validate on the 2026 stays" in conclusions
    questions = render("questions", "md")
    assert "2 questions are still open (1 answered, 1 withdrawn)." in questions
    assert questions.index("### To clinic lab") < questions.index("### To data owner")


def test_user_template_gets_the_same_context(built, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    mine = tmp_path / "mine.html.j2"
    mine.write_text(
        "{% extends '_page.html.j2' %}{% block content %}<p id=n>{{ methods.flows[0].analysed }}</p>"
        "{% for t in dictionary.tables %}<i>{{ t.name }}</i>{% endfor %}{{ study.description|md }}"
        "{% endblock %}", encoding="utf-8")
    html = render("writeup", "html", template=mine)
    page = parse(html)
    assert "1207" in page.all_text and "membersvisits" in page.all_text
    assert ("strong", {}) in page.tags  # the study's Markdown description, rendered
    broken = tmp_path / "broken.md.j2"
    broken.write_text("{% for x in %}", encoding="utf-8")
    from studylog.errors import InputFileError

    with pytest.raises(InputFileError, match="broken.md.j2, line 1"):
        render("methods", "md", template=broken)


def test_templates_are_found_in_the_installed_package() -> None:
    import importlib.resources

    folder = importlib.resources.files("studylog.templates")
    names = {entry.name for entry in folder.iterdir()}
    for document in report.DOCUMENTS:
        for fmt in report.FORMATS:
            assert f"{document}.{fmt}.j2" in names


def test_an_empty_study_renders_every_document(study: Path) -> None:
    for document in report.DOCUMENTS:
        for fmt in report.FORMATS:
            text = render(document, fmt)
            assert "apply them before you share this document" in text
    assert "No data drop has been checked." in render("methods", "md")


def _add_hostile_records() -> None:
    """Text a user might paste, in every kind of record that reaches a Markdown document."""
    from report_study import stamp
    from studylog.store.models import DataTable, Entry, Question, Rule, Threat

    with transaction(locate(), write=True) as session:
        visits = session.query(DataTable).filter_by(name="visits").one()
        session.add(Rule(table_id=visits.id, name="sane-range", expression="systolic_bp < 300 & systolic_bp > 0",
                         severity="warning", why="<b onmouseover=alert(1)>bold</b> | pipes", author="analyst",
                         created_at=stamp(2)))
        session.add(Entry(kind="next", text="# Not a heading <iframe src=x></iframe>", tags=[],
                          author="analyst", created_at=stamp(16)))
        session.add(Entry(kind="next", text="1. not a list &#60;script&#62;alert(2)&#60;/script&#62;",
                          tags=[], author="analyst", created_at=stamp(16)))
        session.add(Entry(kind="conclusion", text="See [the notes](javascript:alert(3)) and "
                          "<https://example.invalid/x>.", tags=[], author="analyst", created_at=stamp(16)))
        session.add(Question(text="> Quoted? <img src=x onerror=alert(4)>", to="data owner", status="open",
                             author="analyst", created_at=stamp(7)))
        session.add(Threat(text="Readings <svg onload=alert(5)>", kind="internal", severity="low",
                           mitigation="[x]: javascript:alert(6)", status="open", author="analyst",
                           created_at=stamp(8)))


class _Rendered(HTMLParser):
    """Tags, attributes and text of HTML that a Markdown viewer produced."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data: str) -> None:
        self.text.append(data)


@pytest.mark.parametrize("document", list(report.DOCUMENTS))
def test_markdown_reads_as_written_and_a_viewer_passing_html_runs_nothing(built, document: str) -> None:  # type: ignore[no-untyped-def]
    _add_hostile_records()
    text = render(document, "md")
    # no HTML entities in the Markdown file: it reads as it was written (an entity someone typed is
    # escaped, so that it too shows as typed)
    typed = re.sub(r"\\&#?\w+;", "", text)
    for entity in ("&gt;", "&lt;", "&amp;", "&quot;", "&#"):
        assert entity not in typed, entity
    # a viewer that passes raw HTML through (markdown-it-py with html enabled, as most viewers are)
    viewer = MarkdownIt("commonmark", {"html": True}).enable("table")
    page = _Rendered()
    page.feed(viewer.render(text))
    allowed = {"h1", "h2", "h3", "h4", "p", "em", "strong", "code", "ul", "ol", "li", "hr", "table", "thead",
               "tbody", "tr", "th", "td", "a", "br", "blockquote"}
    tags = {tag for tag, _ in page.tags}
    assert tags <= allowed, tags - allowed
    for tag, attrs in page.tags:
        assert not any(name.startswith("on") or name == "src" for name in attrs), (tag, attrs)
        assert not (attrs.get("href") or "").lower().startswith(("javascript:", "vbscript:", "data:"))
    shown = "".join(page.text)
    if document in ("dictionary", "writeup"):
        assert "\\<script>alert('x')\\</script>" in text  # escaped in the file, shown as text
        assert "<script>alert('x')</script>" in shown and "<img src=x onerror=alert(1)>" in shown
        # a rule's expression reads as written, its pipe escaped only inside the table cell
        assert "| systolic_bp < 300 & systolic_bp > 0 |" in text and "\\| pipes |" in text
        assert "<b onmouseover=alert(1)>bold</b> | pipes" in shown
    if document in ("conclusions", "writeup"):
        # a leading "#" or "1." in a one-line text opens no heading or list
        assert "- \\# Not a heading \\<iframe src=x>\\</iframe>" in text
        assert "- 1\\. not a list" in text and "<iframe src=x></iframe>" in shown
        assert "&#60;script&#62;" in shown  # an entity typed by someone stays what they typed
        assert "[the notes](javascript:alert(3))" in shown  # a script link stays text
    if document in ("validity", "writeup"):
        assert "<svg onload=alert(5)>" in shown and "[x]: javascript:alert(6)" in shown


def test_the_writeup_reads_as_prose(built) -> None:  # type: ignore[no-untyped-def]
    ids = built.ids
    text = render("writeup", "md")
    flat = " ".join(text.split())
    # each drop's heading names its table, so that two deliveries with one label differ
    drops = [line for line in text.splitlines() if line.startswith("#### Drop ")]
    # (the table is not named twice where the label starts with it)
    assert drops == [f"#### Drop {ids['drop1']}: members, first delivery",
                     f"#### Drop {ids['drop2']}: visits, March", f"#### Drop {ids['drop3']}: visits, April"]
    assert "The check found 2 errors and 1 warning, listed below." in flat
    assert "error findings" not in flat and "0 warnings" not in flat
    # every methods subsection in the order of an analysis is there, an empty one says so
    transform = text.split("### Transformations and scaling")[1].split("###")[0]
    assert transform.strip() == "No decision recorded."
    # reasons, mitigations and conclusions end as sentences
    assert f"**Recode sex X as not recorded.** [D{ids['d1']}]" in text
    assert "Reason: X was a data-entry placeholder." in text
    assert "Mitigation: compare with ward readings." in text
    # the numbers a decision rested on: no "present in n of rows", which with the rows would give a
    # small missing count away
    assert "present in" not in flat
    assert ("At the time, drop 2 held 1,200 records, with income missing in 130 (10.8%)." in flat)
    # the dictionary: units with summaries and ranges, profile rows inside the entry's table
    assert "| Summary (in mmHg) | min 82, mean 131.5, sd 18.2, q1 119, median 130, q3 143, max 231 |" in text
    assert "| Possible range | 40 to 300 mmHg |" in text
    tokens = MarkdownIt("commonmark").enable("table").parse(text)
    in_table = False
    seen_cells = 0
    for token in tokens:
        in_table = {"table_open": True, "table_close": False}.get(token.type, in_table)
        if token.type == "inline" and token.content.startswith("Seen in drop"):
            assert in_table, "a profile row outside its entry's table"
            seen_cells += 1
        if token.type == "inline" and not in_table:
            assert not token.content.startswith("| "), token.content
    assert seen_cells == 8
    # a small missing count is not given away by the number present: sex, 2 of 800 missing
    assert "800 rows, <5 missing (under 0.7%), 3 distinct values" in text and "798" not in text
    # a confirmation is told once, by the status
    assert "confirm of status" not in text and "confirmed on" not in text.split("## Data dictionary")[1] \
        .replace("confirmed by data owner on", "")


def test_moments_read_as_written_by_hand() -> None:
    from studylog.report_dictionary import _moment

    assert _moment("2026-02-01T00:00:00") == "2026-02-01 00:00"
    assert _moment("2026-02-01T08:30:15") == "2026-02-01 08:30:15"
    assert _moment("2026-02-01T08:30:00.000000+01:00") == "2026-02-01 08:30+01:00"
    assert _moment("2026-02-01") == "2026-02-01"


def test_prose_filters() -> None:
    assert [report.plural(n, "error") for n in (0, 1, 2, "<5", 1234)] == [
        "no errors", "1 error", "2 errors", "<5 errors", "1,234 errors"]
    assert [report.series(x) for x in ([], ["a"], ["a", "b"], ["a", "b", "c"])] == [
        "", "a", "a and b", "a, b and c"]
    assert [report.sentence(x) for x in ("ends", "ends.", "asks?", "(aside)", "", None)] == [
        "ends.", "ends.", "asks?", "(aside).", "", ""]


def test_markdown_escapes_only_what_markdown_needs() -> None:
    env = report.environment("md")
    inline, cell, block = env.filters["inline"], env.filters["cell"], env.filters["md"]
    # text a reader wrote, as written
    assert inline("a < b & c > d, x <= 3") == "a < b & c > d, x <= 3"
    assert block("**bold** and `code`") == "**bold** and `code`"
    # what would open a block where the text starts a line
    assert inline("# not a heading") == "\\# not a heading" and inline("2. not a list") == "2\\. not a list"
    assert inline("> not a quote") == "\\> not a quote" and inline("- not an item") == "\\- not an item"
    assert inline("-99 = refused") == "-99 = refused"
    # in a table cell nothing opens a block; the pipe is escaped
    assert cell("#N/A | none") == "#N/A \\| none"
    # what a viewer passing HTML through would run or fetch
    assert inline("<b onclick=x()>") == "\\<b onclick=x()>" and inline("&#60;b&#62;") == "\\&#60;b\\&#62;"
    assert block("![t](http://x.invalid/t.png)") == "!\\[t](http://x.invalid/t.png)"
    assert block("[a](JavaScript:alert(1))") == "[a]\\(JavaScript:alert(1))"
    assert inline("ends in a backslash \\") == "ends in a backslash \\\\"
