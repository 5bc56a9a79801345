"""attrib: where a web application's database time goes, route by route.

>>> import attrib
>>> s = attrib.open(":memory:")
>>> s.schema_version
2
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

from attrib.api import Store, open

try:
    __version__ = version("attrib")
except PackageNotFoundError:  # running from a source tree without installing
    __version__ = "0.0.0"

__all__ = ["Store", "open", "__version__"]
