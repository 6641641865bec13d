"""The demo: the whole job on the synthetic sample runs, end to end, into a temporary folder.

The JSON written is compared with ``runup.report.identification_to_dict`` of an independent
identification of the same file (the JSON output is the reference); HTML is read with the
standard library's ``html.parser``.  All runs are synthetic (sample_runs/README.md).
"""

from __future__ import annotations

import json
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
from typer.testing import CliRunner

import runup
import runup.cli.output  # noqa: F401  (registers plot, report and demo on the app)
import runup.demo
from runup.cli import app
from runup.errors import DataFormatError
from runup.report import CAUTION, identification_to_dict

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tools"))
import render_check  # noqa: E402


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """`runup demo --out DIR` run once through typer's CliRunner."""
    out = tmp_path_factory.mktemp("demo") / "runup-demo"
    res = CliRunner().invoke(app, ["demo", "--out", str(out)])
    return res, out


def test_demo_runs_end_to_end_and_says_what_it_found(demo):
    """Exit 0; for every sample run the output names its criticals, verdict and report path."""
    res, out = demo
    assert res.exit_code == 0, res.output
    for case in runup.demo.DEMO_CASES:
        stem = Path(case.file).stem
        assert f"{stem}: criticals" in res.output
        assert str(out / f"{stem}.html") in res.output.replace("\n", "")
        for suffix in (".identify.json", ".check.json", ".html"):
            assert (out / f"{stem}{suffix}").is_file()
        assert any((out / f"{stem}_plots").glob("bode-*.png"))
    assert "synthetic" in res.output and CAUTION.split(",")[0] in res.output
    assert "split 4,220 / 4,531 rpm" in res.output  # the coastdown's split pair, both branches


def test_demo_json_equals_identify_json(demo):
    """The demo's identify JSON holds the same criticals as identification_to_dict of the run."""
    _res, out = demo
    ident = runup.identify(str(runup.demo.SAMPLE_RUNS / "compressor_coastdown.csv"))
    expected = identification_to_dict(ident)["criticals"]
    written = json.loads((out / "compressor_coastdown.identify.json").read_text(encoding="utf-8"))["criticals"]
    assert [c["speed_rpm"] for c in written] == [c["speed_rpm"] for c in expected]
    assert [c["amplification_factor"] for c in written] == [c["amplification_factor"] for c in expected]
    check = json.loads((out / "compressor_coastdown.check.json").read_text(encoding="utf-8"))
    assert check["rule_set"]["name"] == "api617" and check["caution"] == CAUTION
    compare = json.loads((out / "compressor_coastdown.compare.json").read_text(encoding="utf-8"))
    assert compare["kind"] == "agreement" and "support_stiffness" in compare


def test_demo_reports_parse_and_say_synthetic(demo):
    """Each report parses with html.parser, holds the caution and says the data are synthetic."""
    _res, out = demo
    for case in runup.demo.DEMO_CASES:
        text = (out / f"{Path(case.file).stem}.html").read_text(encoding="utf-8")
        parser = HTMLParser()
        parser.feed(text)
        parser.close()
        assert text.count(CAUTION) == 2
        assert "synthetic sample run" in text


def test_demo_without_sample_runs_exit_2(tmp_path, monkeypatch):
    """Sample runs missing: one 'error:' line naming the folder, exit code 2."""
    monkeypatch.setattr(runup.demo, "SAMPLE_RUNS", tmp_path / "absent")
    with pytest.raises(DataFormatError, match="sample runs not found"):
        runup.demo.run_demo(tmp_path / "out")
    res = CliRunner().invoke(app, ["demo", "--out", str(tmp_path / "out")])
    assert res.exit_code == 2
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: sample runs not found")


# ----------------------------------------------------------------------------- render check


def test_render_check_skips_without_a_browser(tmp_path, monkeypatch, capsys):
    """No browser: exit code 0 and 'skipped: no chromium' on stdout."""
    page = tmp_path / "r.html"
    page.write_text("<p>x</p>", encoding="utf-8")
    monkeypatch.setattr(render_check, "find_browser", lambda: None)
    assert render_check.main([str(page), str(tmp_path / "s.png")]) == 0
    assert capsys.readouterr().out.startswith("skipped: no chromium")


def test_render_check_fails_on_blank_or_missing_screenshot(tmp_path, monkeypatch):
    """A one-colour screenshot or none at all fails with exit code 1; a drawn one passes.
    Blankness is measured on the PNG read back with matplotlib.image.imread."""
    page = tmp_path / "r.html"
    page.write_text("<p>x</p>", encoding="utf-8")
    shot = tmp_path / "s.png"
    monkeypatch.setattr(render_check, "find_browser", lambda: "chromium")

    done = subprocess.CompletedProcess(["chromium"], 0, "", "")

    def blank(_browser, _report, png):
        mpimg.imsave(png, np.ones((60, 80, 3)))
        return done

    def drawn(_browser, _report, png):
        img = np.ones((60, 80, 3))
        img[10:40, 10:70] = 0.0  # a quarter of the pixels black
        mpimg.imsave(png, img)
        return done

    def nothing(_browser, _report, _png):
        return done

    for fake, code in ((blank, 1), (nothing, 1), (drawn, 0)):
        monkeypatch.setattr(render_check, "screenshot", fake)
        assert render_check.main([str(page), str(shot)]) == code
