"""reportkit: a standardized, reproducible appendix for instrumental-variables analyses."""

from __future__ import annotations

__version__ = "0.1.0"
