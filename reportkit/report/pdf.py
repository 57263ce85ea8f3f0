"""Print the appendix HTML to PDF with weasyprint, offline and byte-for-byte reproducibly.

- Nothing is fetched: the URL fetcher accepts ``data:`` URIs only (the figures) and stops
  the render on any other URL, so a PDF never depends on the network or on files
  outside the bundle.
- The same HTML gives the same bytes: the PDF dates come from the document's
  ``<meta name="dcterms.created">``/``modified`` (the run date), and ``SOURCE_DATE_EPOCH``
  is set to that date while rendering, because without the harfbuzz subsetter
  weasyprint subsets fonts with fontTools, which stamps the current time into each
  embedded font unless that variable is set.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, date, datetime
from typing import Any

# 1980-01-01, the earliest date a ZIP file can hold; used when the HTML carries no date.
FALLBACK_EPOCH = 315532800

_CREATED = re.compile(
    r'<meta\s+name="dcterms\.created"\s+content="(\d{4}-\d{2}-\d{2})"\s*/?>', re.IGNORECASE
)


class RefusedURLError(ValueError):
    """The HTML referred to something other than a ``data:`` URI."""


def document_epoch(html: str) -> int:
    """Seconds since 1970 of the document's creation date (UTC midnight), or a fixed value."""
    match = _CREATED.search(html)
    if match is None:
        return FALLBACK_EPOCH
    day = date.fromisoformat(match.group(1))
    return int(datetime(day.year, day.month, day.day, tzinfo=UTC).timestamp())


@contextmanager
def _source_date_epoch(epoch: int) -> Iterator[None]:
    """Set SOURCE_DATE_EPOCH for the render unless the caller already set it."""
    previous = os.environ.get("SOURCE_DATE_EPOCH")
    if previous is None:
        os.environ["SOURCE_DATE_EPOCH"] = str(epoch)
    try:
        yield
    finally:
        if previous is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)


def _data_only_fetcher() -> Any:
    from weasyprint.urls import URLFetcher

    class DataOnlyFetcher(URLFetcher):
        """Serves ``data:`` URIs; refuses every other URL, which stops the render."""

        def fetch(self, url: str, headers: Any = None) -> Any:
            if not url.lower().startswith("data:"):
                raise RefusedURLError(
                    f"the appendix refers to {url[:80]!r}; only data: URIs are allowed"
                )
            return super().fetch(url, headers)

    return DataOnlyFetcher(allowed_protocols={"data"}, fail_on_errors=True)


def render_pdf(html: str) -> bytes:
    """The PDF of a self-contained appendix HTML; the same HTML gives identical bytes."""
    import weasyprint
    from weasyprint.urls import FatalURLFetchingError

    with _source_date_epoch(document_epoch(html)):
        try:
            document = weasyprint.HTML(string=html, url_fetcher=_data_only_fetcher())
            pdf = document.write_pdf()
        except FatalURLFetchingError as error:
            cause = error.__cause__
            message = str(cause) if cause is not None else str(error)
            raise RefusedURLError(message) from error
    if pdf is None:
        raise RuntimeError("weasyprint returned no PDF")
    return pdf
