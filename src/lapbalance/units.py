"""Physical constants and unit conversions used at the input/output boundary."""

from __future__ import annotations

import math

#: Standard gravity [m/s²] (ISO 2533 / CGPM 1901 value).
G0 = 9.80665

KPH = 1.0 / 3.6  #: 1 km/h in m/s
MM = 1e-3  #: 1 mm in m
KW = 1e3  #: 1 kW in W
HPA = 100.0  #: 1 hPa in Pa
DEG = math.pi / 180.0  #: 1 degree in rad
RPM = 2.0 * math.pi / 60.0  #: 1 rev/min in rad/s

# --------------------------------------------------------------------------------------------
# Display units: what the terminal and the report show (files always stay SI, the unit in the
# column name). Exact factors from NIST SP 811 (2008), appendix B: 1 mi/h = 0.44704 m/s,
# 1 lbf = 4.4482216152605 N, 1 ft = 0.3048 m.
# --------------------------------------------------------------------------------------------

MPH = 0.44704  #: 1 mile per hour in m/s (exact)
LBF = 4.4482216152605  #: 1 pound-force in N (exact)
FT = 0.3048  #: 1 foot in m (exact)

#: Display systems: quantity -> (label, size of one display unit in SI).
DISPLAY_SYSTEMS: dict[str, dict[str, tuple[str, float]]] = {
    "metric": {"speed": ("km/h", KPH), "force": ("N", 1.0), "length": ("m", 1.0)},
    "imperial": {"speed": ("mph", MPH), "force": ("lbf", LBF), "length": ("ft", FT)},
}


class Display:
    """Converts SI values to a display system for printing (``metric`` or ``imperial``).

    ``d.speed(v_mps)``, ``d.force(f_n)``, ``d.length(x_m)`` give the display value;
    ``d.unit("speed")`` its label. ``d.speed_kph(v_kph)`` converts a value already in km/h.
    """

    def __init__(self, system: str = "metric"):
        if system not in DISPLAY_SYSTEMS:
            raise ValueError(f"units {system!r} is not one of {', '.join(DISPLAY_SYSTEMS)}")
        self.system = system
        self._t = DISPLAY_SYSTEMS[system]

    def unit(self, quantity: str) -> str:
        """Label of a quantity (``speed``, ``force``, ``length``)."""
        return self._t[quantity][0]

    def _conv(self, quantity: str, si):
        if si is None:
            return None
        return si / self._t[quantity][1]

    def speed(self, v_mps):
        """Speed [m/s] in the display unit."""
        return self._conv("speed", v_mps)

    def speed_kph(self, v_kph):
        """Speed given in km/h, in the display unit."""
        return None if v_kph is None else self._conv("speed", v_kph * KPH)

    def force(self, f_n):
        """Force [N] in the display unit."""
        return self._conv("force", f_n)

    def length(self, x_m):
        """Length [m] in the display unit."""
        return self._conv("length", x_m)


METRIC = Display("metric")
