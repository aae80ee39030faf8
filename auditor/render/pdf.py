"""audit.pdf: WeasyPrint over the same HTML, with a URL fetcher that fetches nothing from outside."""

from __future__ import annotations

import os
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


def html_to_pdf(html: str, fetcher=None) -> bytes:
    """The PDF of ``html``: byte-identical for identical HTML, whenever it is made."""
    fetcher = fetcher or make_fetcher()
    doc = weasyprint.HTML(string=html, base_url="about:blank", url_fetcher=fetcher)
    with _fixed_font_timestamps():
        return doc.write_pdf()
