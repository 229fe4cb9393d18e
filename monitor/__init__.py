"""ctwd-monitor: screen robotic GMAW seams for contact-tip-to-work distance drift.

Estimates are screening indicators, not weld acceptance. The applicable code (e.g. AWS D1.1,
ISO 5817), the qualified WPS and licensed inspection decide whether a weld is acceptable.
"""

import os
from importlib.metadata import PackageNotFoundError, version

# polars' allocator (its bundled jemalloc) hands freed pages back to the OS within a fraction of a
# second; a scan frees and re-allocates the same batch-sized buffers all night, and faulting them
# back in cost about a third of its CPU time (system time). Keep freed pages 10 s for reuse
# (jemalloc's documented default). Read once, when polars first loads; a value set by the user wins.
os.environ.setdefault("_RJEM_MALLOC_CONF", "dirty_decay_ms:10000,muzzy_decay_ms:10000")

try:
    __version__ = version("ctwd-monitor")
except PackageNotFoundError:  # running from a source tree that is not installed
    import tomllib
    from pathlib import Path

    try:
        _meta = tomllib.loads((Path(__file__).resolve().parent.parent / "pyproject.toml").read_text(encoding="utf-8"))
        __version__ = str(_meta["project"]["version"]) + "+source"
    except (OSError, KeyError, tomllib.TOMLDecodeError):
        __version__ = "0.0.0+unknown"
