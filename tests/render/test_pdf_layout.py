"""The PDF stage's shortcuts: tables laid out at planned column widths, and figures embedded with
their own compressed pixel data.

The references outside the project: the report face's metrics as the font file states them (read
with fontTools), the glyph widths WeasyPrint measures when it lays a table out, and Pillow's reading
of PNG data.
"""

from __future__ import annotations

import io
import shutil
import struct
import subprocess
import zlib

import pytest
import weasyprint
from PIL import Image
from weasyprint.formatting_structure import boxes

from auditor.render import pdf as pdf_module
from auditor.render.html import environment, stylesheet
from auditor.render.pdf import html_to_pdf, make_fetcher, png_image_stream
from auditor.render.view import (CHAR_WIDTH_CH, TABLE_WIDTH_CH, column_widths, estimate_widths, result_view,
                                 table_view, text_width_ch)
from auditor.results import CheckResult, Estimate, SubFinding, Table, Verdict


def _font_file(family: str) -> str | None:
    if not shutil.which("fc-match"):
        return None
    out = subprocess.run(["fc-match", "-f", "%{file}", family], capture_output=True, text=True).stdout
    return out if out.endswith(".ttf") and "DejaVuSans" in out else None


def test_character_widths_are_the_report_faces_own():
    """Every printable ASCII width in CHAR_WIDTH_CH is the font's advance width over its digit's, to
    the stated 0.05 (source: the DejaVu Sans file's hmtx table)."""
    path = _font_file("DejaVu Sans")
    if path is None:
        pytest.skip("DejaVu Sans is not installed")
    from fontTools.ttLib import TTFont

    font = TTFont(path)
    cmap, metrics = font.getBestCmap(), font["hmtx"]
    zero = metrics[cmap[ord("0")]][0]
    for code in range(32, 127):
        assert abs(CHAR_WIDTH_CH[chr(code)] - metrics[cmap[code]][0] / zero) <= 0.025 + 1e-9, chr(code)


def test_widths_share_the_table_and_numbers_get_their_full_width():
    cols = ["Analysis", "Contrast", "Estimate", "Lower", "Upper", "Participants needed vs reference"]
    rows = [["ANCOVA on the log scale with a spline in baseline", "TQ-4417 200 ug vs placebo", "1,234,567",
             "-0.000123", "12.5", "2.31"]]
    numeric = [False, False, True, True, True, True]
    widths = column_widths(cols, rows, numeric)
    shares = [float(w.rstrip("%")) for w in widths]
    assert abs(sum(shares) - 100) < 0.5
    for i, is_num in enumerate(numeric):
        if is_num:  # never narrower than its longest value and padding, of the planned width
            assert shares[i] / 100 * TABLE_WIDTH_CH >= text_width_ch(rows[0][i])
    assert shares[0] == max(shares)  # the longest text gets the most room, as automatic layout gives it


def test_no_widths_when_the_numbers_cannot_fit():
    """Twelve columns of eleven-digit numbers need more than the page: automatic layout then."""
    cols = [f"c{i}" for i in range(12)]
    rows = [[f"{10**10 + i:,}" for i in range(12)]]
    assert column_widths(cols, rows, [True] * 12) is None
    view = table_view(Table(id="t", title="Wide", columns=cols, rows=[[10**10 + i for i in range(12)]]))
    assert view["widths"] is None
    assert column_widths([], [], []) is None


def test_invisible_marks_take_no_width():
    assert text_width_ch("\u2068abc\u2069") == text_width_ch("abc")
    assert text_width_ch("ab\u200bcd") == text_width_ch("abcd")


def _finding() -> CheckResult:
    long_label = "Forced expiratory volume in one second after bronchodilator, litres"
    return CheckResult(
        check_id="demo", check_title="Demonstration", outcome="x", outcome_label="x",
        verdict=Verdict.CAUTION, headline="A headline.",
        subfindings=[SubFinding(id="q", question="Is the slope of follow-up on baseline near 1?",
                                verdict=Verdict.NOT_ASSESSABLE, evidence="slope 0.60 (0.52 to 0.68); " * 6)],
        estimates=[Estimate(name=long_label, value=-12345.678, lower=-23456.7, upper=-1234.5, p_value=0.0004,
                            unit="L", note="95% profile-likelihood interval; Holm-adjusted p of power 1: 1"),
                   Estimate(name="Share at the upper bound", value=0.00324)],
        tables=[Table(id="t", title="Treatment effect under each analysis",
                      columns=["Analysis", "Arm vs control", "Effect", "SE", "lower", "upper", "p",
                               "Participants needed vs reference"],
                      rows=[[long_label, "TQ-4417 200 ug", -0.3821, 0.0968, -0.5723, -0.1911, 0.00001, 1.234],
                            ["change score", "TQ-4417 200 ug", 123456.0, 0.0613, -0.43, 9876543.0, 0.2, 0.98]])],
    )


def _cells(box):
    if isinstance(box, boxes.TableCellBox):
        yield box
    for child in getattr(box, "children", None) or []:
        yield from _cells(child)


def _lines(box):
    if isinstance(box, boxes.LineBox):
        yield box
    for child in getattr(box, "children", None) or []:
        yield from _lines(child)


def _text(box) -> str:
    if isinstance(box, boxes.TextBox):
        return box.text
    return "".join(_text(c) for c in getattr(box, "children", None) or [])


def test_planned_tables_keep_values_in_their_cells_and_headers_whole():
    """Laid out by WeasyPrint with the planned widths: every line of a numeric cell fits inside its
    cell (measured glyphs, not the estimate), and no header word is split across lines."""
    view = result_view(_finding(), [0])
    assert view["tables"][0]["widths"] and view["estimate_widths"] and view["subfinding_widths"]
    body = environment().get_template("checks/_finding.html.j2").render(r=view, s={"param": "x"})
    assert body.count('class="data planned"') == 1 and 'class="est planned"' in body and 'class="subs planned"' in body
    html = f"<html><head><style>{stylesheet()}</style></head><body>{body}</body></html>"
    doc = weasyprint.HTML(string=html, base_url="about:blank", url_fetcher=make_fetcher()).render()
    checked = 0
    for page in doc.pages:
        for cell in _cells(page._page_box):
            classes = (cell.element.get("class") or "").split()
            words = set("".join(cell.element.itertext()).split())
            for line in _lines(cell):
                if "num" in classes and cell.element_tag == "td":
                    assert line.position_x + line.width <= cell.content_box_x() + cell.width + 0.5, _text(line)
                    checked += 1
                if cell.element_tag == "th":
                    assert set(_text(line).split()) <= words, _text(line)
    assert checked >= 16


def test_estimate_widths_count_the_note_on_its_own_line():
    short = [{"name": "N", "unit": "", "note": "", "value": "309", "ci": "–", "p": "–"}]
    noted = [{**short[0], "note": "a note much longer than the name of the quantity, on its own line"}]
    assert float(estimate_widths(noted)[0].rstrip("%")) > float(estimate_widths(short)[0].rstrip("%"))


def _png(mode: str, size=(37, 23), **save) -> bytes:
    image = Image.new(mode, size)
    for x in range(size[0]):
        for y in range(size[1]):
            image.putpixel((x, y), {"RGB": (x * 7 % 256, y * 11 % 256, (x * y) % 256),
                                    "RGBA": (x * 7 % 256, y * 11 % 256, 40, 128),
                                    "P": (x + y) % 16, "I;16": x * 1000 + y, "L": (x * 9) % 256}[mode])
    out = io.BytesIO()
    image.save(out, format="PNG", **save)
    return out.getvalue()


def _chunk(kind: bytes, data: bytes) -> bytes:
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))


def test_the_stream_is_the_files_own_pixel_data():
    """Put back into a PNG of its own, the stream decodes (Pillow) to the same pixels, and it holds one
    filter byte and three samples per pixel per row (PNG specification, 7.2 and 11.2.2)."""
    png = _png("RGB")
    stream = png_image_stream(png)
    assert stream is not None
    assert len(zlib.decompress(stream)) == 23 * (1 + 3 * 37)
    header = png[8:8 + 25]  # the IHDR chunk as written
    rebuilt = png[:8] + header + _chunk(b"IDAT", stream) + _chunk(b"IEND", b"")
    assert Image.open(io.BytesIO(rebuilt)).tobytes() == Image.open(io.BytesIO(png)).tobytes()


@pytest.mark.parametrize("png", [
    pytest.param(lambda: _png("RGBA"), id="alpha"),
    pytest.param(lambda: _png("P"), id="palette"),
    pytest.param(lambda: _png("I;16"), id="16-bit grey"),
    pytest.param(lambda: _png("L"), id="8-bit grey"),
    pytest.param(lambda: None, id="interlaced"),
    pytest.param(lambda: _png("RGB")[:-20] + b"\0" * 20, id="damaged end"),
    pytest.param(lambda: b"GIF89a" + b"\0" * 40, id="not a PNG"),
])
def test_other_images_are_not_passed_through(png):
    data = png()
    if data is None:  # Pillow writes no interlaced PNG: make the header say so, with a right CRC
        plain = _png("RGB")
        ihdr = bytearray(plain[16:29])
        ihdr[12] = 1
        data = plain[:8] + _chunk(b"IHDR", bytes(ihdr)) + plain[33:]
    assert png_image_stream(data) is None


def test_a_damaged_chunk_is_not_passed_through():
    png = bytearray(_png("RGB"))
    png[45] ^= 0xFF  # inside the first IDAT's data: its CRC no longer matches
    assert png_image_stream(bytes(png)) is None


def _img_html(png: bytes) -> str:
    import base64

    return f'<html><body><img src="data:image/png;base64,{base64.b64encode(png).decode()}"></body></html>'


def test_the_pdf_carries_the_figure_data_verbatim_and_the_encoder_is_restored():
    from weasyprint import images

    encoder = images.RasterImage._get_png_data
    png = _png("RGB", size=(120, 80))
    first = html_to_pdf(_img_html(png))
    assert png_image_stream(png) in first
    assert html_to_pdf(_img_html(png)) == first  # byte-identical when made again
    assert images.RasterImage._get_png_data is encoder


def test_an_image_with_alpha_still_goes_through_the_encoder():
    png = _png("RGBA", size=(40, 30))
    pdf = html_to_pdf(_img_html(png))
    assert pdf.startswith(b"%PDF") and b"/SMask" in pdf
    assert pdf_module.png_image_stream(png) is None


def test_estimate_widths_plan_for_the_interval_heading_printed():
    """The interval column is planned for the heading the report prints ("97.5% interval" at
    --level 0.975 is wider than "95% interval"); at the default level the plan is as before."""
    rows = [{"name": "Slope", "unit": "", "note": "", "value": "0.90", "ci": "0.85 to 0.95", "p": "0.001"}]
    assert estimate_widths(rows, "95% interval") == estimate_widths(rows)
    assert float(estimate_widths(rows, "97.5% interval")[2].rstrip("%")) > float(estimate_widths(rows)[2].rstrip("%"))
