"""Is the instrument as good as random? Covariate balance, joint tests, an outcome index
and placebo outcomes, computed with the moment engine (see ``checks.py``)."""

from reportkit.balance.checks import balance_checks

__all__ = ["balance_checks"]
