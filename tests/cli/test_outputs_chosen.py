"""Writing only the outputs asked for (``--formats``), figure data in findings.json only on request
(``--figure-data``), outcomes audited across processes giving the same bytes, progress kept off the
output files, the figures' PNG rasters reproducible, and ``validate`` never importing the renderers.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

import auditor.cli as cli
from auditor.cli import app
from auditor.figures import PNG_DPI, encode_png, png_size, to_png
from auditor.pipeline import AuditOptions, audit_study
from auditor.render.jsonout import findings_json
from auditor.results import Figure
from auditor.study import load_study
from tests.cli.test_hostile_inputs import Synthetic, assert_nothing_written
from tests.cli.test_options import assert_refused
from tests.cli.test_validate_broken import _stderr, runner
from tests.conftest import EXAMPLE, ROOT

PRE_POST = ["--check", "pre-post"]


@pytest.fixture(scope="module")
def small_study(tmp_path_factory):
    return Synthetic(params=("WT", "TEMP")).write(tmp_path_factory.mktemp("chosen") / "study")


def test_formats_json_csv_writes_those_two_files_only(small_study, tmp_path):
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(small_study), "-o", str(out), "--formats", "json,csv", *PRE_POST])
    assert res.exit_code == 0, _stderr(res)
    assert sorted(p.name for p in out.iterdir()) == ["findings.csv", "findings.json"]


def test_files_of_an_earlier_audit_not_rewritten_are_named(small_study, tmp_path):
    out = tmp_path / "audit"
    assert runner.invoke(app, ["run", str(small_study), "-o", str(out), "--formats", "json,csv", *PRE_POST]).exit_code == 0
    before = (out / "findings.csv").read_bytes()
    res = runner.invoke(app, ["run", str(small_study), "-o", str(out), "--formats", "json", "--force", *PRE_POST])
    assert res.exit_code == 0, _stderr(res)
    assert "note: findings.csv in " in _stderr(res) and "left as they were (not in --formats)" in _stderr(res)
    assert (out / "findings.csv").read_bytes() == before  # never touched


def test_formats_pdf_alone_and_in_any_order_or_case(small_study, tmp_path):
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(small_study), "-o", str(out), "--formats", " CSV ,html", *PRE_POST])
    assert res.exit_code == 0, _stderr(res)
    assert sorted(p.name for p in out.iterdir()) == ["audit.html", "findings.csv"]


@pytest.mark.parametrize("value,pattern", [
    ("json,pfd", r"^--formats: 'pfd' is not an output format\. Fix: use a comma-separated list of html, pdf, "
                 r"json, csv \(did you mean 'pdf'\?\)\.$"),
    ("xlsx", r"^--formats: 'xlsx' is not an output format\. Fix: use a comma-separated list of html, pdf"),
    ("json,,csv", r"^--formats: '\(empty\)' is not an output format"),
    (",", r"^--formats: names no output\. Fix: give one or more of html,pdf,json,csv\.$"),
])
def test_an_unknown_format_is_refused_before_any_work(small_study, tmp_path, value, pattern):
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(small_study), "-o", str(out), "--formats", value])
    assert_refused(res, [pattern])
    assert_nothing_written(tmp_path, out)


def test_batch_refuses_an_unknown_format_and_honours_a_known_one(small_study, tmp_path):
    res = runner.invoke(app, ["batch", str(small_study), "-o", str(tmp_path / "bad"), "--formats", "htm"])
    assert_refused(res, [r"--formats: 'htm' is not an output format.*did you mean 'html'"])
    res = runner.invoke(app, ["batch", str(small_study), "-o", str(tmp_path / "b"), "--jobs", "1",
                              "--formats", "json"])
    assert res.exit_code == 0, _stderr(res)
    assert sorted(p.name for p in (tmp_path / "b" / "study").iterdir()) == ["findings.json"]
    assert "audit.html" not in (tmp_path / "b" / "index.html").read_text()  # no link to a file not written


def _figures_of(text: str) -> list[dict]:
    return [f for r in json.loads(text)["results"] for f in r["figures"]]


def test_figure_data_only_on_request(small_study):
    audit = audit_study(load_study(small_study), AuditOptions(checks=("pre-post",), quick=True, draw=False))
    compact, full = findings_json(audit), findings_json(audit, figure_data=True)
    assert _figures_of(compact) and all("data" not in f for f in _figures_of(compact))
    assert all(f["data"] for f in _figures_of(full))
    # The points drawn: one per participant with both values, in the scatter of follow-up on baseline.
    scatter = next(f for f in _figures_of(full) if f["kind"] == "scatter_identity")
    assert sum(len(g["x"]) for g in scatter["data"]["groups"]) == 40  # 20 per arm, none missing
    # Apart from the arrays, the two files say the same.
    stripped = json.loads(full)
    for r in stripped["results"]:
        for f in r["figures"]:
            del f["data"]
    assert stripped == json.loads(compact)
    assert len(compact) < len(full)


def test_figure_data_option_on_run(small_study, tmp_path):
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(small_study), "-o", str(out), "--formats", "json", "--figure-data",
                              *PRE_POST])
    assert res.exit_code == 0, _stderr(res)
    figures = _figures_of((out / "findings.json").read_text())
    assert figures and all(f["data"] for f in figures)


def test_outcomes_across_processes_give_the_same_bytes(small_study):
    study = load_study(small_study)
    one = audit_study(study, AuditOptions(checks=("pre-post",), quick=True, jobs=1))
    two = audit_study(study, AuditOptions(checks=("pre-post",), quick=True, jobs=2))
    assert findings_json(one, True) == findings_json(two, True)
    assert [f.png for r in one.results for f in r.figures] == [f.png for r in two.results for f in r.figures]
    assert "jobs" not in json.loads(findings_json(one))["provenance"]["options"]


def test_progress_goes_to_stderr_only(small_study, tmp_path, monkeypatch):
    monkeypatch.setattr(cli, "PROGRESS_MIN_OUTCOMES", 1)  # a long run, shrunk to two outcomes
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(small_study), "-o", str(out), "--formats", "json,csv", "--jobs", "1",
                              *PRE_POST])
    assert res.exit_code == 0, _stderr(res)
    assert "outcome 1 of 2 audited (WT)" in _stderr(res) and "outcome 2 of 2 audited (TEMP)" in _stderr(res)
    for p in out.iterdir():
        assert b"audited (" not in p.read_bytes()


def test_figure_png_is_reproducible_opaque_and_untagged():
    fig = Figure("f", "scatter_xy", "t", {"groups": [{"label": "a", "x": [0, 1, 2, 3], "y": [1, 3, 2, 4]}],
                                          "xlabel": "x", "ylabel": "y"})
    png = to_png(fig)
    assert png == to_png(fig)
    assert png.startswith(b"\x89PNG\r\n\x1a\n")
    assert png[25] == 2  # IHDR colour type 2: RGB, no alpha channel (PNG specification, section 11.2.2)
    assert b"tEXt" not in png and b"tIME" not in png  # no software tag, no time
    width, height = png_size(png)
    # Drawn at 5.2 x 3.4 inches and cropped to its content: at most that many pixels at PNG_DPI.
    assert 0.6 * 5.2 * PNG_DPI < width <= 5.2 * PNG_DPI + 2 and 0.6 * 3.4 * PNG_DPI < height <= 3.4 * PNG_DPI + 2


def test_png_encoder_round_trips_through_an_independent_decoder():
    import io
    import zlib

    import numpy as np
    from PIL import Image

    rgb = np.random.default_rng(5).integers(0, 256, size=(7, 11, 3), dtype=np.uint8)
    rgb[2:5] = 255  # runs of white, as in a figure
    png = encode_png(rgb)
    with Image.open(io.BytesIO(png)) as im:  # Pillow's PNG decoder checks signature, chunk CRCs and zlib stream
        im.load()
        assert im.mode == "RGB" and im.size == (11, 7)
        assert np.array_equal(np.asarray(im), rgb)
    assert png_size(png) == (11, 7)
    # one IDAT; each row starts with filter type 0 (PNG specification, section 9.2)
    idat = png[png.index(b"IDAT") + 4:png.index(b"IEND") - 8]
    rows = np.frombuffer(zlib.decompress(idat), np.uint8).reshape(7, 1 + 33)
    assert (rows[:, 0] == 0).all()


def test_validate_imports_no_renderer_or_model_library():
    code = ("import runpy, sys\n"
            f"sys.argv = ['auditor', 'validate', {str(EXAMPLE)!r}]\n"
            "try:\n    runpy.run_module('auditor.cli', run_name='__main__')\n"
            "except SystemExit as exc:\n    assert not exc.code, exc.code\n"
            "heavy = ('weasyprint', 'matplotlib', 'statsmodels', 'jinja2', 'scipy', 'rich')\n"
            "print('LOADED', sorted(m for m in heavy if m in sys.modules))\n")
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert res.returncode == 0, res.stderr
    assert "valid (7 outcome(s)" in res.stdout
    assert "LOADED []" in res.stdout, res.stdout
