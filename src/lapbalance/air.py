r"""Air density: ISO 2533 standard atmosphere, ideal gas, and humid air (CIPM-2007).

All functions take and return SI units (Pa, K, kg/m³, m) unless the name says otherwise.

References
----------
.. [1] ISO 2533:1975, Standard Atmosphere (troposphere constants: p0 = 101325 Pa,
       T0 = 288.15 K, lapse rate -6.5 K/km, R = 287.05287 J/(kg K), g0 = 9.80665 m/s²).
.. [2] A. Picard, R.S. Davis, M. Gläser, K. Fujii, "Revised formula for the density of moist
       air (CIPM-2007)", Metrologia 45 (2008) 149-155, doi:10.1088/0026-1394/45/2/004.
"""

from __future__ import annotations

import math

from lapbalance.units import G0

#: Specific gas constant of dry air [J/(kg K)], ISO 2533 value [1].
R_DRY_AIR = 287.05287
#: Sea-level standard pressure [Pa] [1].
P0 = 101325.0
#: Sea-level standard temperature [K] [1].
T0 = 288.15
#: Tropospheric temperature lapse rate [K/m] [1].
LAPSE = -0.0065
#: Radius of the Earth used for geopotential altitude [m] [1].
R_EARTH = 6356766.0


def geopotential_altitude(geometric_altitude: float) -> float:
    """Geopotential altitude H [m] from geometric altitude z [m]: H = r z / (r + z) [1]."""
    return R_EARTH * geometric_altitude / (R_EARTH + geometric_altitude)


def isa_temperature(altitude: float, geopotential: bool = False) -> float:
    """ISO 2533 temperature [K] at ``altitude`` [m] (troposphere, 0-11 km)."""
    h = altitude if geopotential else geopotential_altitude(altitude)
    return T0 + LAPSE * h  # [1]


def isa_pressure(altitude: float, geopotential: bool = False) -> float:
    """ISO 2533 pressure [Pa] at ``altitude`` [m] (troposphere, 0-11 km)."""
    h = altitude if geopotential else geopotential_altitude(altitude)
    t = T0 + LAPSE * h
    return P0 * (t / T0) ** (-G0 / (R_DRY_AIR * LAPSE))  # [1]


def isa_density(altitude: float, geopotential: bool = False) -> float:
    """ISO 2533 standard-atmosphere density [kg/m³] at ``altitude`` [m].

    Parameters
    ----------
    altitude : float
        Altitude above mean sea level, geometric unless ``geopotential`` is True. [m]
    geopotential : bool
        Treat ``altitude`` as geopotential altitude H.

    Returns
    -------
    float
        Air density. [kg/m³]
    """
    if not -1000.0 <= altitude <= 11000.0:
        raise ValueError(f"altitude {altitude} m outside the troposphere model (-1 to 11 km)")
    return isa_pressure(altitude, geopotential) / (
        R_DRY_AIR * isa_temperature(altitude, geopotential)
    )


def ideal_gas_density(pressure: float, temperature: float) -> float:
    """Dry-air density [kg/m³] from pressure [Pa] and temperature [K]: rho = p / (R T) [1]."""
    return pressure / (R_DRY_AIR * temperature)


def saturation_vapour_pressure_cipm2007(temperature: float) -> float:
    """Saturation vapour pressure of water [Pa] at ``temperature`` [K], CIPM-2007 eq. A1.3 [2]."""
    t = temperature
    return math.exp(1.2378847e-5 * t**2 - 1.9121316e-2 * t + 33.93711047 - 6.3431645e3 / t)


def humid_air_density_cipm2007(
    pressure: float, temperature: float, relative_humidity: float, co2_fraction: float = 0.0004
) -> float:
    r"""Density of moist air [kg/m³] by the CIPM-2007 formula [2].

    .. math:: \rho = \frac{p M_a}{Z R T}\left[1 - x_v\left(1 - \frac{M_v}{M_a}\right)\right]

    Parameters
    ----------
    pressure : float
        Air pressure. [Pa]
    temperature : float
        Air temperature. [K]
    relative_humidity : float
        Relative humidity as a fraction, 0 to 1. [-]
    co2_fraction : float
        Mole fraction of CO2. [-]

    Returns
    -------
    float
        Density of moist air. [kg/m³]

    Notes
    -----
    Valid 600-1100 hPa and 15-27 °C per [2]; it degrades slowly outside that range.
    """
    p, T = pressure, temperature
    t = T - 273.15
    R = 8.314472
    Ma = (28.96546 + 12.011 * (co2_fraction - 0.0004)) * 1e-3
    Mv = 18.01528e-3
    f = 1.00062 + 3.14e-8 * p + 5.6e-7 * t**2
    xv = relative_humidity * f * saturation_vapour_pressure_cipm2007(T) / p
    a0, a1, a2 = 1.58123e-6, -2.9331e-8, 1.1043e-10
    b0, b1, c0, c1 = 5.707e-6, -2.051e-8, 1.9898e-4, -2.376e-6
    d, e = 1.83e-11, -0.765e-8
    Z = (
        1
        - (p / T) * (a0 + a1 * t + a2 * t**2 + (b0 + b1 * t) * xv + (c0 + c1 * t) * xv**2)
        + (p / T) ** 2 * (d + e * xv**2)
    )
    return p * Ma / (Z * R * T) * (1 - xv * (1 - Mv / Ma))  # [2] eq. (1)
