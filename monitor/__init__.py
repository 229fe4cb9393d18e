"""ctwd-monitor: screen robotic GMAW seams for contact-tip-to-work distance drift.

Estimates are screening indicators, not weld acceptance. The applicable code (e.g. AWS D1.1,
ISO 5817), the qualified WPS and licensed inspection decide whether a weld is acceptable.
"""

from importlib.metadata import PackageNotFoundError, version

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
