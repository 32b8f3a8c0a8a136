"""Air density: ISO 2533 standard atmosphere and CIPM-2007 moist air."""

import pytest

from lapbalance import air


# Source: ISO 2533:1975 standard atmosphere, troposphere (p0 = 101325 Pa, T0 = 288.15 K,
# lapse -6.5 K/km, R = 287.05287 J/(kg K), g0 = 9.80665 m/s²), densities as tabulated from
# these constants (ICAO Doc 7488 / US Standard Atmosphere 1976 share them). The altitude is
# *geopotential* H in this table; tolerance 0.1 %.
@pytest.mark.parametrize(
    "altitude_m, density",
    [(0.0, 1.22500), (500.0, 1.16727), (1000.0, 1.11164), (2000.0, 1.00649)],
)
def test_iso2533_density_geopotential_altitude(altitude_m, density):
    assert air.isa_density(altitude_m, geopotential=True) == pytest.approx(density, rel=1e-3)


# Source: the same ISO 2533 atmosphere evaluated at *geometric* altitude z (H = r z/(r + z),
# r = 6356766 m); the public relative-density table (0.9529 at 500 m, 0.9075 at 1000 m,
# 0.8217 at 2000 m, times 1.225) matches the geometric reading. Tolerance 0.1 %.
@pytest.mark.parametrize(
    "altitude_m, density",
    [(0.0, 1.22500), (500.0, 1.16727), (1000.0, 1.11166), (2000.0, 1.00655),
     (2000.0, 0.8217 * 1.225)],
)
def test_iso2533_density_geometric_altitude(altitude_m, density):
    assert air.isa_density(altitude_m) == pytest.approx(density, rel=1e-3)


# Source: ISO 2533:1975, tropospheric temperature T = 288.15 K - 6.5 K/km * H and pressure
# 79495.20 Pa at H = 2000 m (p = p0 (T/T0)^5.255880).
def test_iso2533_temperature_and_pressure_at_2000m():
    assert air.isa_temperature(2000.0, geopotential=True) == pytest.approx(275.15, abs=1e-9)
    assert air.isa_pressure(2000.0, geopotential=True) == pytest.approx(79495.20, rel=1e-6)


# Source: geometric altitude is above geopotential altitude by z^2 / (r + z): 0.63 m at 2 km
# (H = r z / (r + z), ISO 2533).
def test_geopotential_altitude_of_2000m_geometric():
    assert air.geopotential_altitude(2000.0) == pytest.approx(2000.0 - 0.6291, abs=1e-3)


def test_isa_density_outside_troposphere_model_raises():
    with pytest.raises(ValueError, match="troposphere"):
        air.isa_density(15000.0)


# Source: Picard, Davis, Gläser, Fujii, "Revised formula for the density of moist air
# (CIPM-2007)", Metrologia 45 (2008) 149-155, eq. (1) with the constants of its appendix,
# evaluated at these conditions (values printed to 6 figures; rel 1e-5).
@pytest.mark.parametrize(
    "pressure, t_c, rh, density",
    [
        (101325.0, 20.0, 0.50, 1.19931),
        (101325.0, 20.0, 0.00, 1.20456),
        (101325.0, 15.0, 0.00, 1.22552),
        (101325.0, 30.0, 0.80, 1.15001),
        (101325.0, 15.0, 0.50, 1.22163),
    ],
)
def test_cipm2007_moist_air_density(pressure, t_c, rh, density):
    rho = air.humid_air_density_cipm2007(pressure, t_c + 273.15, rh)
    assert rho == pytest.approx(density, rel=1e-5)


# Source: Picard et al. 2008 (CIPM-2007), appendix eq. A1.3: saturation vapour pressure at
# 20 °C is 2339.16 Pa (value printed to 6 figures).
def test_cipm2007_saturation_vapour_pressure_20c():
    assert air.saturation_vapour_pressure_cipm2007(293.15) == pytest.approx(2339.16, rel=1e-5)


# Source: ideal gas law rho = p / (R T) with the ISO 2533 gas constant; at ISO sea level this
# must give the ISO 2533 sea-level density 1.225 kg/m³ (4 figures).
def test_ideal_gas_density_at_iso_sea_level():
    assert air.ideal_gas_density(101325.0, 288.15) == pytest.approx(1.225, rel=5e-4)
