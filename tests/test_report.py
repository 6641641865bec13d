"""Reports: the HTML is one self-contained document whose tables equal the JSON output.

External references
-------------------
* HTML is parsed with the standard library's ``html.parser`` (an independent parser).
* The numbers are compared with the JSON documents of ``runup.report.identification_to_dict``,
  ``runup.criteria_report.check_to_dict`` and ``runup.compare.agreement_to_dict``, formatted
  here with Python's format mini-language (``f"{v:,.0f}"``), not with the report's code.
* PNG signature: ISO/IEC 15948:2004, sec. 5.2 (eight bytes).
All runs are synthetic (sample_runs/README.md).
"""

from __future__ import annotations

import math
from datetime import UTC, datetime
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

import runup
import runup.cli.output  # noqa: F401  (registers plot, report and demo on the app)
from runup.cli import app
from runup.criteria import load_rules
from runup.io.predicted import read_predicted
from runup.report import CAUTION
from runup.reporting import gather, margin_bands_rpm, write_report

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_runs"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948:2004, sec. 5.2
WHEN = datetime(2025, 1, 2, 3, 4, tzinfo=UTC)


class _Doc(HTMLParser):
    """Collects what the tests look at: start tags with attributes, table cells, all text."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.tables: dict[str, list[list[str]]] = {}
        self.text: list[str] = []
        self._table: str | None = None
        self._cell: list[str] | None = None
        self._in_body = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "table":
            self._table = a.get("id") or f"table{len(self.tables)}"
            self.tables[self._table] = []
        elif tag == "tbody":
            self._in_body = True
        elif tag == "tr" and self._table and self._in_body:
            self.tables[self._table].append([])
        elif tag == "td" and self._table and self._in_body:
            self._cell = []

    def handle_endtag(self, tag):
        if tag == "td" and self._cell is not None:
            self.tables[self._table][-1].append("".join(self._cell))
            self._cell = None
        elif tag == "tbody":
            self._in_body = False
        elif tag == "table":
            self._table = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def _parse(path: Path) -> _Doc:
    doc = _Doc()
    doc.feed(path.read_text(encoding="utf-8"))
    doc.close()
    return doc


def _f(value, digits=0, sign=False):
    """Independent formatting of a JSON number: thousands separators, en dash for null."""
    if value is None or not math.isfinite(value):
        return "–"
    return f"{value:+,.{digits}f}" if sign else f"{value:,.{digits}f}"


def _ci(pair, digits):
    return "" if pair is None else f" [{_f(pair[0], digits)}, {_f(pair[1], digits)}]"


@pytest.fixture(scope="module")
def coastdown(tmp_path_factory):
    """Report of the synthetic coastdown (split critical) with api617 and the sample prediction."""
    ident = runup.identify(str(SAMPLES / "compressor_coastdown.csv"))
    inputs = gather(ident, rules=load_rules("api617"),
                    predicted=read_predicted(SAMPLES / "compressor_predicted.toml"), generated_at=WHEN)
    path, figures = write_report(inputs, tmp_path_factory.mktemp("report") / "coastdown.html")
    return inputs, path, figures, _parse(path)


def test_html_is_self_contained_and_embeds_every_plot(coastdown):
    """html.parser reads the report; one inline <svg> per plot drawn; no script, no
    stylesheet link, no src attribute, and every href points inside the document."""
    _inputs, _path, figures, doc = coastdown
    tags = [t for t, _a in doc.tags]
    assert tags.count("svg") == len(figures) > 0
    assert "script" not in tags and "link" not in tags and "img" not in tags
    assert all("src" not in a for _t, a in doc.tags)
    hrefs = [v for _t, a in doc.tags for k, v in a.items() if k in ("href", "xlink:href")]
    assert hrefs and all(h.startswith("#") for h in hrefs)
    ids = [a["id"] for _t, a in doc.tags if "id" in a]
    assert len(ids) == len(set(ids)), "ids of the inline SVGs are made unique"
    # each href points at an id of the document
    assert {h[1:] for h in hrefs} <= set(ids)


def test_caution_at_top_and_bottom(coastdown):
    """The caution of runup.report appears before the first table and after the last."""
    _inputs, path, _figures, _doc = coastdown
    text = path.read_text(encoding="utf-8")
    first, last = text.find(CAUTION), text.rfind(CAUTION)
    assert first != -1 and first != last
    assert first < text.find("<table") and last > text.rfind("</table>")


def test_criticals_table_equals_identification_json(coastdown):
    """Each cell of the criticals and split tables equals identification_to_dict, formatted."""
    inputs, _path, _figures, doc = coastdown
    crits = inputs.identification_doc["criticals"]
    rows = doc.tables["criticals"]
    assert len(rows) == len(crits) == 2
    for row, c in zip(rows, crits, strict=True):
        assert row[2] == _f(c["speed_rpm"])
        assert row[3] == _f(c["natural_speed_rpm"]) + _ci(c["natural_speed_ci95_rpm"], 0)
        assert row[4] == _f(c["damping_ratio"], 3) + _ci(c["damping_ratio_ci95"], 3)
        assert row[5] == _f(c["amplification_factor"], 1) + _ci(c["amplification_factor_ci95"], 1)
        assert row[6] == f"{_f(c['lower_half_power_rpm'])}–{_f(c['upper_half_power_rpm'])}"
        assert row[9] == c["method"] and row[10] == (", ".join(c["flags"]) or "–")  # the report writes – for none
    split = crits[0]["split"]
    branches = doc.tables["split"]
    assert [r[2] for r in branches] == [_f(split["lower"]["speed_rpm"]), _f(split["upper"]["speed_rpm"])]
    assert [r[6] for r in branches] == [split["lower"]["dominant_probe"], split["upper"]["dominant_probe"]]


def test_estimators_verdicts_and_scorecard_equal_their_json(coastdown):
    """AF estimators, margin verdicts and the scorecard equal their JSON documents."""
    inputs, _path, _figures, doc = coastdown
    for row, c in zip(doc.tables["estimators"], inputs.identification_doc["criticals"], strict=True):
        by = {r["estimator"]: r for r in c["estimators"]["rows"]}
        g = by["global_fit"]
        assert row[1].startswith(_f(g["amplification_factor"], 1) + _ci(g["amplification_factor_ci95"], 1))
    margins = inputs.check_doc["margins"]
    for row, v in zip(doc.tables["margins"], margins, strict=True):
        assert row[0] == {"pass": "pass", "fail": "FAIL"}[v["status"]]
        assert row[2] == _f(v["speed_rpm"]) and row[6] == _f(v["margin_percent"], 1)
        assert row[7] == _f(v["required_margin_percent"], 1)
    for row, m in zip(doc.tables["scorecard"], inputs.agreement_doc["matches"], strict=True):
        assert row[2:8] == [_f(m["predicted"]["speed_rpm"]), _f(m["measured"]["speed_rpm"]),
                            _f(m["speed_error_percent"], 1, sign=True), _f(m["af_ratio"], 2),
                            _f(m["mac"], 3), _f(m["score"], 2)]
    text = "".join(doc.text)
    assert f"score {_f(inputs.agreement_doc['score'])} / 100" in text
    assert inputs.agreement_doc["support_stiffness"]["caveat"] in text


def test_provenance_lists_sources_with_hashes_and_rules_with_sources(coastdown):
    """Input files with their SHA-256, probes with planes and angles, rule sources."""
    inputs, _path, _figures, doc = coastdown
    run = inputs.identification_doc["run"]
    assert doc.tables["sources"] == [[s["path"], s["sha256"]] for s in run["sources"]]
    assert [r[:2] for r in doc.tables["probes"]] == [[p["name"], p["plane"]] for p in run["probes"]]
    assert [r[2] for r in doc.tables["rules"]] == [r["source"] for r in inputs.check_doc["rules"]]
    text = "".join(doc.text)
    assert "2025-01-02 03:04 UTC" in text and inputs.identification_doc["tool"]["version"] in text


def test_margin_bands_from_verdict_numbers(coastdown):
    """Below MOS the band is [MOS (1 - m/100), MOS] with m the required margin of the nearest
    critical (definition of margin_percent, (MOS - Nc)/MOS; docs/criteria.md)."""
    inputs, *_ = coastdown
    below = [v for v in inputs.check_doc["margins"] if v["side"] == "below_min_operating"]
    nearest = min(below, key=lambda v: v["margin_percent"])
    mos = nearest["reference_speed_rpm"]
    np.testing.assert_allclose(margin_bands_rpm(inputs.check, segment=0),
                               [(mos * (1 - nearest["required_margin_percent"] / 100), mos)], rtol=1e-12)


def test_markdown_writes_pngs_beside_it(tmp_path):
    """--format md: every figure as a PNG (signature checked) in <stem>_files, linked."""
    ident = runup.identify(str(SAMPLES / "pump_startup.parquet"))
    path, figures = write_report(gather(ident, rules=load_rules("api610"), generated_at=WHEN),
                                 tmp_path / "pump.md", format="md")
    text = path.read_text(encoding="utf-8")
    assert CAUTION.split(".")[0] in text
    for f in figures:
        png = tmp_path / "pump_files" / f"{f.key}.png"
        assert png.read_bytes()[:8] == PNG_SIGNATURE
        assert f"(pump_files/{f.key}.png)" in text
    assert sorted(p.name for p in tmp_path.iterdir()) == ["pump.md", "pump_files"]  # nothing temporary left


def test_cli_report_and_plot_kinds(tmp_path):
    """runup report writes the HTML; runup plot writes each kind as PNG; exit code 0."""
    runner = CliRunner()
    run = str(SAMPLES / "compressor_startup.csv")
    pred = str(SAMPLES / "compressor_predicted.toml")
    res = runner.invoke(app, ["report", run, "--rules", "api617", "--predicted", pred, "-o", str(tmp_path / "r.html")])
    assert res.exit_code == 0, res.output
    assert "<svg" in (tmp_path / "r.html").read_text(encoding="utf-8")
    for kind in ("bode", "polar", "compare", "map"):
        out = tmp_path / f"{kind}.png"
        res = runner.invoke(app, ["plot", run, "--kind", kind, "--predicted", pred, "--rules", "api617", "-o", str(out)])
        assert res.exit_code == 0, res.output
        assert out.read_bytes()[:8] == PNG_SIGNATURE


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["plot", "{run}", "--kind", "compare", "-o", "{tmp}/c.png"], "needs --predicted"),
        (["plot", "{run}", "--kind", "polar", "--probe", "DE-X", "--probe", "DE-Y", "-o", "{tmp}/p.png"], "one probe"),
        (["plot", "{run}", "-o", "{tmp}/p.jpg"], ".png"),
        (["plot", "{tmp}/missing.csv", "-o", "{tmp}/p.png"], "missing.csv"),
        (["report", "{run}", "-o", "{tmp}/nowhere/r.html"], "does not exist"),
        (["report", "{run}", "--rules", "nope", "-o", "{tmp}/r.html"], "nope"),
    ],
)
def test_cli_bad_input_one_line_exit_2(tmp_path, args, needle):
    """Bad input: exit code 2 and one 'error: ...' line naming the problem, no traceback."""
    argv = [a.format(run=SAMPLES / "compressor_startup.csv", tmp=tmp_path) for a in args]
    res = CliRunner().invoke(app, argv)
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ") and needle in lines[0]
    assert "Traceback" not in res.output
