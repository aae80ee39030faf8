"""audit.pdf: WeasyPrint over the same HTML, with a URL fetcher that fetches nothing from outside."""

from __future__ import annotations

import io
import os
import struct
import zlib
from contextlib import contextmanager

import weasyprint
from weasyprint import urls as wp_urls


class RefusedURL(ValueError):
    pass


if hasattr(wp_urls, "URLFetcher"):
    class EmbeddedOnlyFetcher(wp_urls.URLFetcher):
        """Serves ``data:`` URLs (the report's own inline figures) and refuses every other URL.

        ``refused`` lists what was asked for and refused, so a test can show that a label smuggling
        ``<img src="file:///etc/passwd">`` or an http address fetched nothing.
        """

        def __init__(self, **kwargs):
            super().__init__(**kwargs)
            self.refused: list[str] = []

        def fetch(self, url, headers=None):
            if url.startswith("data:"):
                return super().fetch(url, headers)
            self.refused.append(url)
            raise RefusedURL(f"refused to fetch {url}")

    def make_fetcher():
        return EmbeddedOnlyFetcher()
else:  # pragma: no cover - older WeasyPrint takes a function
    def make_fetcher():
        refused = []

        def fetch(url, *args, **kwargs):
            if url.startswith("data:"):
                return wp_urls.default_url_fetcher(url, *args, **kwargs)
            refused.append(url)
            raise RefusedURL(f"refused to fetch {url}")

        fetch.refused = refused
        return fetch


FIXED_FONT_EPOCH = "0"
"""Timestamp written into the embedded font subsets (the font tools stamp the clock otherwise)."""


@contextmanager
def _fixed_font_timestamps():
    """Make the embedded font subsets carry a fixed timestamp, so the same HTML gives the same PDF
    bytes at any time (the subsetter honours SOURCE_DATE_EPOCH). The variable is restored after."""
    before = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = FIXED_FONT_EPOCH
    try:
        yield
    finally:
        if before is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = before


PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def png_image_stream(png: bytes) -> bytes | None:
    """The compressed pixel data of ``png`` as it can go into the PDF unchanged, or None when it
    cannot.

    A PDF image with the Flate filter and a PNG predictor (ISO 32000-1, 7.4.4.4) holds exactly what a
    PNG's IDAT chunks hold, one zlib stream of filtered scanlines (PNG, ISO/IEC 15948, 10 and 11.2.4),
    when the PNG is 8-bit truecolour without alpha (colour type 2), uncompressed by any other method
    and not interlaced. Those are the report's figures (auditor.figures draws opaque RGB). Anything
    else, or a file whose chunks do not check out (CRC), gives None."""
    if not png.startswith(PNG_SIGNATURE) or len(png) < 33:
        return None
    pos, idat, header = len(PNG_SIGNATURE), [], None
    while pos + 12 <= len(png):
        length, kind = struct.unpack(">I4s", png[pos:pos + 8])
        data = png[pos + 8:pos + 8 + length]
        if len(data) != length or png[pos + 8 + length:pos + 12 + length] != struct.pack(
                ">I", zlib.crc32(kind + data)):
            return None
        if header is None:
            if kind != b"IHDR" or length != 13:
                return None
            header = struct.unpack(">IIBBBBB", data)
            if header[2:] != (8, 2, 0, 0, 0):  # bit depth, colour type, compression, filter, interlace
                return None
        elif kind == b"IDAT":
            idat.append(data)
        elif kind == b"IEND":
            return b"".join(idat) or None
        elif kind in (b"PLTE", b"tRNS"):  # would change the colours a viewer shows
            return None
        pos += 12 + length
    return None


def _pass_through_png_data(encode):
    """WeasyPrint's PNG encoder for images, made to hand over the file's own compressed pixel data
    when :func:`png_image_stream` can, and to decode and re-encode only otherwise."""
    def get_png_data(pillow_image):
        source = getattr(pillow_image, "fp", None)
        if pillow_image.format == "PNG" and isinstance(source, io.BytesIO):
            stream = png_image_stream(source.getvalue())
            if stream is not None:
                return stream
        return encode(pillow_image)
    return staticmethod(get_png_data)


@contextmanager
def _embedded_pngs_kept():
    """While the PDF is written, embed each figure's PNG data as it is instead of decoding and
    recompressing it (a third of writing the example's PDF went there). The same PNG gives the same
    stream, so the PDF stays byte-identical from run to run. The encoder is restored after."""
    from weasyprint import images

    raster = getattr(images, "RasterImage", None)
    encode = getattr(raster, "_get_png_data", None)
    if encode is None:  # pragma: no cover - another WeasyPrint layout: nothing to change
        yield
        return
    raster._get_png_data = _pass_through_png_data(encode)
    try:
        yield
    finally:
        raster._get_png_data = staticmethod(encode)


def html_to_pdf(html: str, fetcher=None) -> bytes:
    """The PDF of ``html``: byte-identical for identical HTML, whenever it is made."""
    fetcher = fetcher or make_fetcher()
    doc = weasyprint.HTML(string=html, base_url="about:blank", url_fetcher=fetcher)
    with _fixed_font_timestamps(), _embedded_pngs_kept():
        return doc.write_pdf()
