"""Pump physics: the head-capacity curve at any speed, column friction, the system curve and the
operating point where they meet.

Base units throughout: rate [m^3/d], head and depth [m], power [W], speed as a ratio of the
rated speed [-] (a variable-speed drive at frequency f turns the pump at f / f_rated of its rated
speed; motor slip is neglected). Depths are positive downward from the well's datum; the
discharge head is the head at the wellhead above the datum.

* affinity laws (Q ~ N, H ~ N^2, P ~ N^3), closed form;
* column friction by Darcy-Weisbach with the Colebrook-White friction factor, or by
  Hazen-Williams where a C is given; minor losses of the fittings h_m = K v^2 / (2 g);
* system head H_sys(Q) = pumping level depth(Q) + column friction(Q) + minor losses(Q) +
  discharge head;
* operating point: H_pump(Q, r) = H_sys(Q), a bracketed root (Brent) on the monotone (PCHIP)
  interpolation of the maker's curve.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq

from blendq.errors import ModelError
from blendq.units import format_quantity

#: standard acceleration of gravity [m/s^2] (CGPM 1901 definition)
GRAVITY = 9.80665
#: density of groundwater [kg/m^3] used for power and pressure (common practice: fresh water
#: near 15 degC)
WATER_DENSITY = 999.1
#: kinematic viscosity of groundwater [m^2/s] for the Reynolds number (common practice: fresh
#: water near 15 degC)
WATER_VISCOSITY = 1.14e-6
#: seconds in a day, to turn m^3/d into m^3/s
SECONDS_PER_DAY = 86400.0


class PumpError(ModelError):
    """A pump that cannot deliver a rate (it cannot lift the water, or it runs off its curve).

    The message is written in a display unit system (:data:`blendq.units.UNIT_SYSTEMS`) and can
    be written again in another with :meth:`in_units`, so that a report or a command shows the
    rates and heads in the project's units (gpm, m3/d or L/s; ft or m).

    Parameters
    ----------
    write : callable(units) -> str
        Writes the message in a unit system.
    units : str
        The unit system of ``str(error)``.
    cannot_lift : bool
        True when the pump's head falls short of the system's (False: it has head to spare at
        the end of its curve or of the rates modelled).
    """

    def __init__(self, write: Callable[[str], str], units: str = "SI",
                 cannot_lift: bool = True) -> None:
        self.write = write
        self.units = units
        self.cannot_lift = cannot_lift
        super().__init__(write(units))

    def in_units(self, units: str) -> str:
        """The message in ``units``."""
        return self.write(units)

    def prefixed(self, prefix: str, units: str | None = None) -> PumpError:
        """The same error with ``prefix`` before its message (in ``units``, default its own)."""
        write = self.write
        return PumpError(lambda u: prefix + write(u), units or self.units, self.cannot_lift)


def rate_text(rate: float, units: str) -> str:
    """A rate [m^3/d] in the display units ``units`` ("US", "SI", "SI-L/s")."""
    return format_quantity(float(rate), "rate", units)


def _h(head: float, units: str) -> str:
    return format_quantity(float(head), "length", units)


def affinity(rate, head, power, speed_ratio):
    """Scale a pump's duty point from its rated speed to ``speed_ratio`` x that speed.

    Parameters
    ----------
    rate : float or ndarray [m^3/d]
    head : float or ndarray [m]
    power : float or ndarray [W]
    speed_ratio : float
        N / N_rated [-].

    Returns
    -------
    tuple of (rate, head, power)
        r Q, r^2 H, r^3 P.

    References
    ----------
    Karassik, Messina, Cooper and Heald (2008), Pump Handbook, 4th ed., the affinity laws
    for a change of speed at constant impeller diameter.
    """
    r = float(speed_ratio)
    return np.asarray(rate) * r, np.asarray(head) * r**2, np.asarray(power) * r**3


def colebrook(reynolds: float, relative_roughness: float) -> float:
    """Darcy friction factor of turbulent flow in a round pipe (Colebrook-White), or 64/Re
    in laminar flow (Re < 2,300).

    Parameters
    ----------
    reynolds : float
        Reynolds number [-].
    relative_roughness : float
        epsilon / D [-].

    Returns
    -------
    float
        Darcy friction factor f [-].

    References
    ----------
    Colebrook, C. F. (1939), Turbulent flow in pipes, J. Inst. Civil Eng. 11, 133-156:
    1/sqrt(f) = -2 log10(eps/(3.7 D) + 2.51/(Re sqrt(f))).
    """
    if reynolds <= 0:
        return 0.0
    if reynolds < 2300.0:
        return 64.0 / reynolds
    e = relative_roughness / 3.7

    def residual(x):  # x = 1/sqrt(f)
        return x + 2.0 * np.log10(e + 2.51 * x / reynolds)

    x = brentq(residual, 1.0, 100.0, xtol=1e-13, rtol=1e-13)
    return 1.0 / x**2


def minor_loss(rate, diameter: float, k_total: float) -> np.ndarray:
    """Head lost in the fittings of the column and discharge piping at ``rate``.

    Parameters
    ----------
    rate : float or ndarray [m^3/d]
    diameter : float
        Inside diameter [m] the loss coefficients refer to.
    k_total : float
        Sum of the fittings' resistance coefficients K [-] (valves, elbows, check valve,
        pitless adapter, meter), each referred to the velocity in ``diameter``.

    Returns
    -------
    ndarray
        h_m = K v^2 / (2 g) [m], same shape as ``rate``.

    References
    ----------
    Crane Co. (2009), Flow of Fluids Through Valves, Fittings and Pipe, Technical Paper 410,
    the resistance coefficient K: h_L = K v^2 / (2 g).
    """
    q = np.abs(np.asarray(rate, float)) / SECONDS_PER_DAY  # m^3/s
    v = q / (np.pi * diameter**2 / 4.0)
    return float(k_total) * v**2 / (2.0 * GRAVITY)


def friction_loss(rate, length: float, diameter: float, roughness: float | None = None,
                  hazen_williams_c: float | None = None,
                  viscosity: float = WATER_VISCOSITY) -> np.ndarray:
    """Head lost to friction in the pump column at ``rate``.

    Parameters
    ----------
    rate : float or ndarray [m^3/d]
    length : float
        Column length [m].
    diameter : float
        Inside diameter [m].
    roughness : float, optional
        Absolute roughness epsilon [m] (Darcy-Weisbach with Colebrook-White).
    hazen_williams_c : float, optional
        Hazen-Williams C [-]; used instead of ``roughness`` when given.
    viscosity : float
        Kinematic viscosity [m^2/s].

    Returns
    -------
    ndarray
        Friction head [m], same shape as ``rate``.

    References
    ----------
    Darcy-Weisbach h_f = f (L/D) v^2/(2 g), Colebrook (1939); Hazen-Williams in SI units
    h_f = 10.67 L Q^1.852 / (C^1.852 D^4.8704), Q in m^3/s (Williams and Hazen 1920, the SI
    form of e.g. Mays 2010, Water Resources Engineering, eq. 12.4.14).
    """
    q = np.abs(np.asarray(rate, float)) / SECONDS_PER_DAY  # m^3/s
    if hazen_williams_c is not None:
        return 10.67 * length * q**1.852 / (hazen_williams_c**1.852 * diameter**4.8704)
    if roughness is None:
        raise ModelError("the column needs a roughness or a Hazen-Williams C")
    area = np.pi * diameter**2 / 4.0
    v = q / area
    re = v * diameter / viscosity
    f = np.vectorize(lambda r: colebrook(r, roughness / diameter))(re)
    return f * length / diameter * v**2 / (2.0 * GRAVITY)


@dataclass(frozen=True)
class PumpCurve:
    """A pump's head-capacity curve at its rated speed.

    Attributes
    ----------
    rate : ndarray [m^3/d]
        Increasing rates of the maker's table.
    head : ndarray [m]
        Total dynamic head at each rate, falling as the rate rises.
    efficiency : ndarray or None
        Pump (bowl) efficiency [-] at each rate, or None when the sheet gives none.
    """

    rate: np.ndarray
    head: np.ndarray
    efficiency: np.ndarray | None = None

    def __post_init__(self) -> None:
        q, h = np.asarray(self.rate, float), np.asarray(self.head, float)
        if q.ndim != 1 or q.size < 2 or q.shape != h.shape:
            raise ModelError("a pump curve needs at least two (rate, head) points")
        if np.any(np.diff(q) <= 0):
            raise ModelError("the pump curve's rates must increase down the table")
        if np.any(np.diff(h) > 0):
            raise ModelError("the pump curve's head must not rise with the rate (a curve with "
                             "a rising part near shutoff has two rates for one head)")
        object.__setattr__(self, "_head", PchipInterpolator(q, h, extrapolate=False))
        if self.efficiency is not None:
            e = np.asarray(self.efficiency, float)
            object.__setattr__(self, "_eff", PchipInterpolator(q, e, extrapolate=False))

    @property
    def max_rate(self) -> float:
        return float(self.rate[-1])

    def head_at(self, rate, speed_ratio: float = 1.0):
        """Pump head [m] at ``rate`` [m^3/d] and speed ratio r: r^2 H_1(Q / r) (affinity laws);
        NaN off the scaled curve."""
        r = float(speed_ratio)
        return r**2 * self._head(np.asarray(rate, float) / r)

    def efficiency_at(self, rate, speed_ratio: float = 1.0):
        """Pump efficiency [-] at ``rate`` and speed ratio r: eta_1(Q / r) (a duty point keeps
        its efficiency along its affinity parabola); NaN when the curve has none."""
        if self.efficiency is None:
            return np.full(np.shape(rate), np.nan)
        return self._eff(np.asarray(rate, float) / float(speed_ratio))


@dataclass(frozen=True)
class SystemCurve:
    """Head the pump must give at each rate: lift + column friction + minor losses + discharge
    head.

    Attributes
    ----------
    level : callable
        Pumping level depth [m below the datum] at a rate [m^3/d].
    length, diameter : float
        Column length and inside diameter [m].
    roughness : float or None
        Absolute roughness [m].
    hazen_williams_c : float or None
    discharge_head : float
        Head at the wellhead above the datum [m].
    minor_k : float
        Sum of the fittings' resistance coefficients K [-] at the column diameter.
    """

    level: Callable[[np.ndarray], np.ndarray]
    length: float
    diameter: float
    roughness: float | None = None
    hazen_williams_c: float | None = None
    discharge_head: float = 0.0
    minor_k: float = 0.0

    def friction(self, rate):
        """Column friction plus the fittings' minor losses [m] at ``rate`` [m^3/d]."""
        return friction_loss(rate, self.length, self.diameter, self.roughness,
                             self.hazen_williams_c) + minor_loss(rate, self.diameter, self.minor_k)

    def head(self, rate):
        """System head [m] at ``rate`` [m^3/d]."""
        return np.asarray(self.level(rate), float) + self.friction(rate) + self.discharge_head


def operating_point(pump: PumpCurve, system: SystemCurve, speed_ratio: float,
                    max_rate: float | None = None, units: str = "SI") -> float:
    """The rate [m^3/d] where the pump at ``speed_ratio`` meets the system curve.

    Parameters
    ----------
    pump : PumpCurve
    system : SystemCurve
    speed_ratio : float
        N / N_rated [-], > 0.
    max_rate : float, optional
        Largest rate the level function serves [m^3/d]; the search stops there.
    units : str
        Display unit system of an error's message ("US", "SI" or "SI-L/s").

    Returns
    -------
    float
        Rate [m^3/d].

    Raises
    ------
    PumpError
        When the pump cannot lift the water at that speed (its head at the lowest rate of the
        curve is below the system head), or when it meets the system beyond the end of its
        curve or of ``max_rate``.

    References
    ----------
    Brent (1973), Algorithms for Minimization without Derivatives (the bracketed root);
    Fritsch and Carlson (1980), SIAM J. Numer. Anal. 17, 238-246 (monotone interpolation).
    """
    r = float(speed_ratio)
    if not r > 0:
        raise ModelError(f"speed ratio {r!r} must be greater than zero")
    # the ends of the scaled curve, pulled in by a rounding step so that Q / r stays on it
    lo, hi = float(pump.rate[0]) * r * (1 + 1e-12), pump.max_rate * r * (1 - 1e-12)
    if max_rate is not None:
        hi = min(hi, max_rate)
    lo = max(lo, 1e-9 * hi)

    def excess(q):
        return float(pump.head_at(q, r) - system.head(q))

    at_lo, at_hi = excess(lo), excess(hi)
    if not at_lo > 0:
        have, need = float(pump.head_at(lo, r)), float(system.head(lo))
        shutoff = float(pump.rate[0]) == 0.0

        def write(u: str) -> str:
            where = "at shutoff (no flow)" if shutoff else f"at {rate_text(lo, u)}, the lowest rate of " \
                "its curve,"
            return (f"the pump cannot lift the water at {r:.0%} of rated speed: {where} it "
                    f"gives {_h(have, u)} of head but the system needs {_h(need, u)} (lift, "
                    "friction and discharge head)")

        raise PumpError(write, units)
    if at_hi > 0:
        where = "the end of its curve" if max_rate is None or hi < max_rate \
            else "the rates modelled"
        raise PumpError(
            lambda u: f"at {r:.0%} of rated speed the pump still has {_h(at_hi, u)} of head to "
                      f"spare at {rate_text(hi, u)}, {where}: the operating point lies off the curve",
            units, cannot_lift=False)
    return float(brentq(excess, lo, hi, xtol=1e-9, rtol=1e-12))


def speed_for_rate(pump: PumpCurve, system: SystemCurve, rate: float,
                   max_ratio: float = 1.0, units: str = "SI") -> float:
    """The speed ratio [-] at which the pump delivers ``rate`` [m^3/d] into the system.

    ``units`` is the display unit system of an error's message.

    Raises
    ------
    PumpError
        When even ``max_ratio`` x the rated speed cannot lift the water at that rate, or the
        rate lies beyond the end of the curve at every speed that could deliver it.
    """
    need = float(system.head(rate))

    def excess(r):
        h = float(pump.head_at(rate, r))
        return -need if np.isnan(h) else h - need

    top = excess(max_ratio)
    if not top > 0:
        have = float(pump.head_at(rate, max_ratio))
        raise PumpError(
            lambda u: f"the pump cannot lift the water at {rate_text(rate, u)}: the system needs "
                      f"{_h(need, u)} of head and the pump at {max_ratio:.0%} of rated speed "
                      + ("is off its curve" if np.isnan(have) else f"gives {_h(have, u)}"),
            units)
    low = rate / pump.max_rate * (1 + 1e-12)  # below this the rate is off the scaled curve
    if excess(low) >= 0:
        raise PumpError(
            lambda u: f"{rate_text(rate, u)} lies beyond the end of the pump curve at every speed "
                      "that could deliver it (the pump has head to spare there): a smaller "
                      "pump or a throttle is needed", units, cannot_lift=False)
    return float(brentq(excess, low, max_ratio, xtol=1e-12, rtol=1e-12))


def wire_to_water(rate, head, pump_efficiency, motor_efficiency: float,
                  drive_efficiency: float):
    """Electrical power [W] drawn to deliver ``rate`` [m^3/d] at ``head`` [m].

    P = rho g Q H / (eta_pump eta_motor eta_drive).

    References
    ----------
    Karassik et al. (2008), Pump Handbook, 4th ed.: water power rho g Q H and the overall
    (wire-to-water) efficiency as the product of the pump, motor and drive efficiencies.
    """
    q = np.asarray(rate, float) / SECONDS_PER_DAY
    water = WATER_DENSITY * GRAVITY * q * np.asarray(head, float)
    return water / (np.asarray(pump_efficiency, float) * motor_efficiency * drive_efficiency)


def energy_per_volume(power, rate):
    """Energy per volume pumped [kWh/m^3] from power [W] and rate [m^3/d]."""
    return np.asarray(power, float) / 1000.0 * 24.0 / np.asarray(rate, float)
