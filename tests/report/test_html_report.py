"""The HTML run report: sections, caution, identity, self-containment, and a real browser.

Checks here are structural (what the page holds and how it references its
figures) or read back from the run folder the page was written from; the
browser check loads the file in headless Chromium (see ``browser.py``).
"""

from __future__ import annotations

import base64
import html
import json
import shutil
from html.parser import HTMLParser
from pathlib import Path

import fmpy
import pytest

from linobs.errors import UsageError
from linobs.pipeline import RunSummary
from linobs.report.html import write_report
from linobs.report.html_parts import SCRIPT
from tests.report.browser import open_page
from tests.support.former_names import former_run_folder

SECTIONS = ("overview", "study", "fmu", "observability", "schedule", "validation", "export",
            "failures")
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


class Page(HTMLParser):
    """Tags, attributes and the text of each ``<section>`` of a page."""

    def __init__(self, text: str) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str]]] = []
        self.sections: dict[str, str] = {}
        self.text: list[str] = []
        self._section: str | None = None
        self.feed(text)

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        self.tags.append((tag, a))
        if tag == "section":
            self._section = a.get("id")
            self.sections[self._section or ""] = ""

    def handle_endtag(self, tag: str) -> None:
        if tag == "section":
            self._section = None

    def handle_data(self, data: str) -> None:
        self.text.append(data)
        if self._section is not None:
            self.sections[self._section] += data

    def all(self, tag: str) -> list[dict[str, str]]:
        return [a for t, a in self.tags if t == tag]

    @property
    def body_text(self) -> str:
        return "".join(self.text)


def summary_of(run: Path) -> RunSummary:
    return RunSummary.model_validate_json((run / "summary.json").read_text(encoding="utf-8"))


def check_self_contained(text: str, page: Page) -> int:
    """Every figure a PNG data URI, no reference that leaves the file; returns the image count."""
    images = page.all("img")
    for img in images:
        src = img["src"]
        assert src.startswith("data:image/png;base64,"), src[:60]
        assert base64.b64decode(src.split(",", 1)[1], validate=True).startswith(PNG_MAGIC)
        assert img.get("alt")
    for tag, attrs in page.tags:
        for key in ("src", "href", "srcset", "action", "data", "poster"):
            value = attrs.get(key)
            if value is not None and tag != "img":
                assert value.startswith("#"), f"<{tag} {key}={value!r}> leaves the page"
        assert tag not in ("link", "iframe", "object", "embed", "base"), tag
    assert "http://" not in text and "https://" not in text
    assert "url(" not in text and "@import" not in text   # no CSS resources
    csp = [m for m in page.all("meta") if m.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0]["content"]
    return len(images)


# ------------------------------------------------------------------------------ full run
@pytest.fixture(scope="module")
def report(stage_run: Path) -> tuple[Path, str, Page]:
    gains = stage_run / "figures" / "schedule_gains.png"
    # the pipeline writes the report (and the gain figure) at the end of every run
    assert (stage_run / "report.html").exists() and gains.exists()
    gains.unlink()
    gains.with_suffix(".svg").unlink()
    path = write_report(stage_run)
    assert gains.exists()              # a missing gain figure is drawn again by the report
    text = path.read_text(encoding="utf-8")
    return path, text, Page(text)


@pytest.mark.slow
def test_report_holds_every_section_and_the_caution_twice(stage_run: Path, report) -> None:
    path, text, page = report
    assert path == stage_run / "report.html"
    ids = {a.get("id") for _, a in page.tags}
    for key in SECTIONS:
        assert key in ids and page.sections.get(key, "").strip(), key
    summary = summary_of(stage_run)
    caution = [a for a in page.all("div") if a.get("class") == "caution"]
    assert [c["id"] for c in caution] == ["caution-top", "caution-bottom"]
    assert page.body_text.count(summary.caution) == 2
    for word in ("engineering aids", "hardware-in-the-loop", "qualified engineers",
                 "functional-safety standards", "licensed practice"):
        assert word in summary.caution
    # the caution comes before the first section and after the last (structural)
    assert text.index('id="caution-top"') < text.index('<section') and \
        text.rindex('</section>') < text.index('id="caution-bottom"')


@pytest.mark.slow
def test_report_names_the_fmu_and_the_findings(stage_run: Path, report) -> None:
    _, _, page = report
    summary = summary_of(stage_run)
    table = json.loads((stage_run / "export" / "schedule_table.json").read_text())
    fmu = page.sections["fmu"]
    assert summary.fmu_sha256 in fmu and len(summary.fmu_sha256) == 64
    assert table["fmu"]["model_name"] in fmu and table["fmu"]["guid"] in fmu
    assert "four_tank_export" in page.sections["study"]
    assert "v1 (input): 3 values" in page.sections["study"]
    for line in summary.regions or []:
        assert line in page.sections["observability"]
    assert "distance to unobservability" in page.sections["observability"]
    assert "Gain maps" in page.sections["schedule"]
    assert "decay reserve" in page.sections["validation"]
    for line in summary.comparison or []:
        assert line in page.sections["validation"]
    for state in (summary.validation_rms or {}):
        assert state in page.sections["validation"]
    frozen = json.loads((stage_run / "validation" / "frozen.json").read_text())
    assert f"{frozen['passed']}" in page.sections["validation"]
    assert frozen["criterion"] in page.sections["validation"]
    assert "Tables written" in page.sections["export"]
    assert "export/schedule_table.json" in page.sections["export"]
    assert "largest gain entries" in page.sections["schedule"]
    assert "No node was refused" in page.sections["schedule"]


@pytest.mark.slow
def test_report_is_self_contained_with_every_figure(stage_run: Path, report) -> None:
    _, text, page = report
    count = check_self_contained(text, page)
    # the five pipeline figures and the gain maps the report drew
    assert count == 6
    assert (stage_run / "figures" / "schedule_gains.png").is_file()
    assert (stage_run / "figures" / "schedule_gains.svg").is_file()


@pytest.mark.slow
def test_report_opens_in_chromium_with_every_figure_decoded(report) -> None:
    path, _, page = report
    result = open_page(path)
    assert result.page_messages == [], "\n".join(result.page_messages)
    assert "data-script-errors" not in result.body, result.body.get("data-script-errors")
    assert result.figures_total == len(page.all("img")) > 0
    assert result.figures_loaded == result.figures_total


@pytest.mark.slow
def test_browser_check_sees_a_broken_page(tmp_path: Path) -> None:
    # control: the same script on a page with an image that does not decode and a failing
    # script must be reported as such, or the check above could pass without looking
    broken = tmp_path / "broken.html"
    broken.write_text(f"<!DOCTYPE html><html><head><script>{SCRIPT}</script></head><body>"
                      '<img src="data:image/png;base64,AAAA" alt="x">'
                      "<script>undefinedFunctionOfTheTest();</script></body></html>")
    result = open_page(broken)
    assert (result.figures_loaded, result.figures_total) == (0, 1)
    assert "undefinedFunctionOfTheTest" in result.body.get("data-script-errors", "")
    assert any("Uncaught" in line for line in result.page_messages), result.stderr[-2000:]


@pytest.mark.slow
def test_report_escapes_text_and_is_repeatable(stage_run: Path, tmp_path: Path) -> None:
    copy = tmp_path / "run"
    shutil.copytree(stage_run, copy)
    data = json.loads((copy / "summary.json").read_text())
    hostile = '<script>alert("x")</script> & <img src=x onerror=alert(1)>'
    data["notes"] = [hostile]
    (copy / "summary.json").write_text(json.dumps(data))
    before = {p.relative_to(copy): p.read_bytes() for p in copy.rglob("*") if p.is_file()}
    text = write_report(copy).read_text(encoding="utf-8")
    assert html.escape(hostile, quote=True) in text
    assert "<script>alert" not in text and "<img src=x" not in text
    page = Page(text)
    assert hostile in page.sections["failures"]       # shown as text, not markup
    assert len(page.all("script")) == 1               # only the report's own script
    # the summary names files of the original folder: the moved copy lists its own
    assert "export/schedule_table.json" in page.sections["export"]
    assert str(stage_run) not in page.sections["export"]
    again = write_report(copy).read_text(encoding="utf-8")
    assert again == text                              # deterministic: nothing recomputed
    after = {p.relative_to(copy): p.read_bytes() for p in copy.rglob("*") if p.is_file()}
    assert after.keys() == before.keys()              # nothing left behind (no -wal, no .tmp)
    assert [k for k in after if after[k] != before[k]] == [Path("report.html")]


@pytest.mark.slow
def test_report_lists_refused_nodes_and_continuity_flags(stage_run: Path, tmp_path: Path) -> None:
    # the stage study refuses no node: edit a copy so that node 4 is refused (as the design
    # stage records it) and its neighbor pair is flagged, then read the report back
    copy = tmp_path / "run"
    shutil.copytree(stage_run, copy, ignore=shutil.ignore_patterns("schedule_gains.*",
                                                                   "report.html"))
    schedule = json.loads((copy / "design" / "schedule.json").read_text())
    schedule["nodes"][4].update(status="refused", message="mode 0.99 is unobservable", L=[])
    (copy / "design" / "schedule.json").write_text(json.dumps(schedule))
    (copy / "design" / "refused.json").write_text(json.dumps([
        {"index": 4, "point": {"v1": 3.0, "v2": 3.0}, "message": "mode 0.99 is unobservable",
         "unmovable_modes": [[0.99, 0.0], [0.5, -0.25]]}]))
    (copy / "design" / "continuity.json").write_text(json.dumps([
        {"node_a": 1, "node_b": 4, "values_a": {"v1": 2.0, "v2": 3.0},
         "values_b": {"v1": 3.0, "v2": 3.0}, "axis": "v1", "relative_change": None,
         "pole_shift": None, "model_change": 0.01, "cause": "verdict change",
         "message": "node 4 is refused: the edge of the usable region"}]))
    page = Page(write_report(copy).read_text(encoding="utf-8"))
    sched = page.sections["schedule"]
    assert "mode 0.99 is unobservable" in sched and "v1 = 3, v2 = 3" in sched
    assert "0.99" in sched and "0.5−0.25j" in sched
    assert "refused neighbor" in sched and "v1: 2 → 3" in sched and "verdict change" in sched
    svg = (copy / "figures" / "schedule_gains.svg").read_text(encoding="utf-8")
    assert 'id="refused-cell' in svg                  # the redrawn figure marks the node


@pytest.mark.slow
def test_a_run_folder_written_before_the_decay_reserve_rename_reads_and_resumes(
        stage_run: Path, tmp_path: Path) -> None:
    from linobs.export.table import SCHEMA_VERSION, read_table
    from linobs.pipeline import run_study

    copy = tmp_path / "run"
    shutil.copytree(stage_run, copy, ignore=shutil.ignore_patterns("report.html"))
    fresh = summary_of(stage_run)
    former_run_folder(copy)          # earlier keys, figure name and table schema version
    on_disk = json.loads((copy / "summary.json").read_text())
    assert "validation_worst_margin" in on_disk and "validation_worst_decay_reserve" not in on_disk
    assert "worst_margin" in json.loads((copy / "validation" / "frozen.json").read_text())
    assert (copy / "figures" / "validation_margin.png").is_file()
    assert not (copy / "figures" / "validation_decay_reserve.png").exists()
    # the report reads the earlier names, and the figure under its earlier file name
    assert summary_of(copy).validation_worst_decay_reserve == \
        fresh.validation_worst_decay_reserve is not None
    page = Page(write_report(copy).read_text(encoding="utf-8"))
    validation = page.sections["validation"]
    assert "smallest decay reserve" in validation and "miss the required decay" in validation
    assert "No frozen-point report" not in validation
    assert "frozen-point decay reserve map" in [img["alt"] for img in page.all("img")]
    assert "could not read" not in page.sections["failures"]
    # resumed, the run carries on from those files and writes the new names
    summary = run_study(stage_run.parent / "study.toml", copy, workers=1, resume=True)
    assert summary.stages["sweep"].computed_now == 0
    assert summary.validation_worst_decay_reserve == fresh.validation_worst_decay_reserve
    assert summary.export_usable == fresh.export_usable
    on_disk = json.loads((copy / "summary.json").read_text())
    assert "validation_worst_decay_reserve" in on_disk and "validation_worst_margin" not in on_disk
    assert (copy / "figures" / "validation_decay_reserve.png").is_file()
    table = read_table(copy / "export" / "schedule_table.json")
    before = read_table(stage_run / "export" / "schedule_table.json")
    assert table.schema_version == SCHEMA_VERSION
    assert table.validation == before.validation and table.schedule == before.schedule


def test_write_report_needs_a_finished_run(tmp_path: Path) -> None:
    with pytest.raises(UsageError, match="no summary.json"):
        write_report(tmp_path)
    (tmp_path / "summary.json").write_text("{}")
    with pytest.raises(UsageError, match="not a readable run summary"):
        write_report(tmp_path)
    assert not (tmp_path / "report.html").exists()


# ------------------------------------------------------------------------------ partial runs
@pytest.mark.slow
def test_report_of_a_study_without_an_estimator(observability_run: Path) -> None:
    text = write_report(observability_run).read_text(encoding="utf-8")
    page = Page(text)
    summary = summary_of(observability_run)
    for key in SECTIONS:
        assert key in page.sections, key
    assert page.body_text.count(summary.caution) == 2
    assert "no [estimator] table" in page.sections["schedule"]
    assert "no [estimator] table" in page.sections["export"]
    assert "validated" in page.sections["validation"]
    obs = page.sections["observability"]
    assert f"observable{summary.observable}" in obs.replace(" ", "")
    assert summary.fmu_sha256 in page.sections["fmu"]
    guid = fmpy.read_model_description(summary.fmu).guid    # no table: from the FMU itself
    assert guid in page.sections["fmu"] and "model description" in page.sections["fmu"]
    assert check_self_contained(text, page) == 2            # margin map and verdict counts
    assert not (observability_run / "figures" / "schedule_gains.png").exists()


@pytest.mark.slow
def test_report_of_a_refused_export_shows_the_reason(refused_run: Path) -> None:
    path = write_report(refused_run)
    text = path.read_text(encoding="utf-8")
    page = Page(text)
    summary = summary_of(refused_run)
    assert summary.export_refused
    export = page.sections["export"]
    assert "Export refused." in export and summary.export_refused in export
    boxes = [a for a in page.all("div") if a.get("class") == "refused"]
    assert boxes, "the refusal is not highlighted"
    assert not (refused_run / "export" / "schedule_table.json").exists()
    assert "miss the" in page.sections["validation"] and "fail" in page.sections["validation"]
    assert f"export refused: {summary.export_refused}" in page.sections["failures"]
    check_self_contained(text, page)
    result = open_page(path)
    assert result.page_messages == [] and "data-script-errors" not in result.body
    assert result.figures_loaded == result.figures_total > 0
