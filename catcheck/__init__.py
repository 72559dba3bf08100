"""catcheck: check large stellar catalogues for physical consistency.

>>> import catcheck
>>> result = catcheck.check("release.parquet", profile="profile.toml", rules=["core"])
>>> result.passed, len(result.flags)
"""

from __future__ import annotations

__version__ = "0.1.0"

from catcheck.api import CheckResult, check, check_frame

__all__ = ["CheckResult", "__version__", "check", "check_frame"]
