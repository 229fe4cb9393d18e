"""The canonical sample frame and how a cell's export maps onto it.

ingest knows nothing of the monitor package: it receives an :class:`ExportSpec` of plain column
names and SI scale factors (built from config/cell.toml by ``monitor.config``) and returns polars
frames in SI units.

Canonical sample columns (one row a sample):

==================  =======  =====================================================
column              unit     meaning
==================  =======  =====================================================
``t``               s        seconds since the first sample of the file (float64)
``ts``              —        absolute timestamp, UTC (null when the export has none)
``current``         A        welding current
``voltage``         V        arc voltage
``wire_feed``       m/s      wire feed speed
``travel_speed``    m/s      travel speed (null when not logged)
``seam``            —        seam label (null when not logged)
``part``            —        part name (null when not logged)
``serial``          —        part serial (null when not logged)
``tip_change``      —        true on samples welded right after a contact-tip change
                             (Boolean; present only when mapped)
==================  =======  =====================================================
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["ChannelMap", "ExportSpec", "ArcSettings", "REQUIRED_CHANNELS"]

REQUIRED_CHANNELS = ("current", "voltage", "wire_feed")


@dataclass(frozen=True)
class ChannelMap:
    """One measured channel: its column in the export and the factor to SI."""

    column: str
    scale: float  # multiply the logged value by this to get SI
    unit: str  # the unit string as configured, for messages


@dataclass(frozen=True)
class ExportSpec:
    """Column mapping of a cell's export (config/cell.toml, [export])."""

    time: str
    current: ChannelMap
    voltage: ChannelMap
    wire_feed: ChannelMap
    travel_speed: ChannelMap | None = None
    seam: str | None = None
    part: str | None = None
    serial: str | None = None
    csv_separator: str = ","
    tip_change: str | None = None  # optional marker column: nonzero / "true" after a tip change


#: Times closer than this [s] to a trim edge or to the minimum duration count as on it. Times are
#: float seconds, and polars and numpy may round the same sample's time differently in the last
#: bit (a division by a constant done through its reciprocal, or not): a sample logged exactly on
#: an edge, the usual case when trims are whole multiples of the sample period, is then inside
#: the window, or the seam long enough, however its time was rounded. Far below any sample period.
EDGE_TOL_S = 1e-9


@dataclass(frozen=True)
class ArcSettings:
    """How arc-on stretches become seams (config/cell.toml, [arc]); SI units."""

    min_current: float = 30.0  # A: samples above are arc-on
    trim_start: float = 0.5  # s: arc-start transient left out
    trim_end: float = 0.3  # s: crater fill left out
    min_duration: float = 1.0  # s: shorter arc-on stretches are not seams
    max_gap: float = 0.25  # s: a gap between samples longer than this inside a seam is a dropout
    max_dropout_fraction: float = 0.02  # a channel null/invalid on more than this share -> invalid

    # What comparisons use, so that a sample on an edge is inside however its time was rounded
    # (:data:`EDGE_TOL_S`): keep t >= start + trim_start_edge and t <= end - trim_end_edge; a
    # seam is long enough when its arc-on time >= min_duration_edge.
    @property
    def trim_start_edge(self) -> float:
        """``trim_start`` less :data:`EDGE_TOL_S` [s]."""
        return self.trim_start - EDGE_TOL_S

    @property
    def trim_end_edge(self) -> float:
        """``trim_end`` less :data:`EDGE_TOL_S` [s]."""
        return self.trim_end - EDGE_TOL_S

    @property
    def min_duration_edge(self) -> float:
        """``min_duration`` less :data:`EDGE_TOL_S` [s]."""
        return self.min_duration - EDGE_TOL_S
