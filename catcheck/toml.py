"""TOML reading: the standard library's tomllib (Python >= 3.11) or tomli on 3.10."""

from __future__ import annotations

import sys

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

loads = tomllib.loads
TOMLDecodeError = tomllib.TOMLDecodeError
