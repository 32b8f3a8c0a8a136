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
