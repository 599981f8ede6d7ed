"""Well-to-well interference in a wellfield: each well's drawdown at the others.

A pumping well lowers the head at its neighbours. With the aquifer linear in the rates, the
drawdown at well i caused by all other wells is a superposition,

    s_i = sum_(j != i) A_ij Q_j,

with A_ij the drawdown at well i per unit rate of well j [m per m^3/d]: the interference
matrix. Its entries come from the Theis solution (transient, when a storativity and a time
since the start of pumping are given) or from the Thiem equation (steady, with a radius of
influence). The diagonal is zero: a well's drawdown from its own pumping is the zone model's
(:mod:`blendq.well.hydraulics`), so the two add without counting the well twice.

Stated assumption: for interference the wells are taken as fully penetrating one equivalent
aquifer of transmissivity T (the sum of the zone transmissivities), confined, homogeneous,
isotropic and of infinite extent (Theis) or with a constant head at the radius of influence R
around each pumping well (Thiem). How the interference is distributed over a well's zones is
neglected: it lowers the far-field head of every zone of a well by the same amount. Wells are
line sinks, so the drawdown at well i is taken at its centre, a distance r_ij from well j.

All functions work on plain floats and numpy arrays in base units (m, m^2/d, d, m^3/d).

References
----------
Theis, C.V. (1935) The relation between the lowering of the piezometric surface and the rate
and duration of discharge of a well using ground-water storage. Trans. AGU 16(2), 519-524.
Thiem, G. (1906) Hydrologische Methoden. Gebhardt, Leipzig.
Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data, 2nd ed.
ILRI Publication 47 (confined aquifers: the Thiem and Theis methods; the annex table of W(u)).
Abramowitz, M. and Stegun, I.A. (1964) Handbook of Mathematical Functions. NBS Applied
Mathematics Series 55, section 5.1 (the exponential integral E1 = W).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import exp1

from blendq.errors import InputError


def theis_well_function(u: ArrayLike) -> np.ndarray:
    """Theis well function W(u), the exponential integral E1(u).

    Parameters
    ----------
    u : float or array
        Dimensionless argument u = r^2 S / (4 T t) [-], positive.

    Returns
    -------
    ndarray
        W(u) [-].

    Notes
    -----
    W(u) = integral from u to infinity of exp(-y) / y dy = E1(u) (Abramowitz and Stegun 1964,
    5.1.1), computed by :func:`scipy.special.exp1`.

    References
    ----------
    Theis, C.V. (1935) Trans. AGU 16(2), 519-524.
    Kruseman, G.P. and de Ridder, N.A. (1990) ILRI Publication 47, annex table of W(u).
    """
    return exp1(np.asarray(u, float))


def interference_matrix(
    x: ArrayLike,
    y: ArrayLike,
    transmissivity: float,
    storativity: float | None = None,
    time: float | None = None,
    radius_of_influence: float | None = None,
    well_radius: float | ArrayLike = 0.0,
    names: Sequence[str] | None = None,
) -> np.ndarray:
    """Drawdown at each well per unit rate of each other well (Theis or Thiem).

    Give ``storativity`` and ``time`` for the Theis solution, or ``radius_of_influence`` for
    the Thiem equation; not both.

    Parameters
    ----------
    x, y : array, shape (n_wells,)
        Well coordinates [m].
    transmissivity : float
        Transmissivity T of the equivalent aquifer [m^2/d], positive.
    storativity : float, optional
        Storativity S of the equivalent aquifer [-], in (0, 1] (Theis).
    time : float, optional
        Time since the start of pumping t [d], positive (Theis).
    radius_of_influence : float, optional
        Radius of influence R [m] around each pumping well, beyond which its drawdown is
        zero (Thiem); larger than every well radius.
    well_radius : float or array of shape (n_wells,), default 0
        Well radius r_w [m]; two wells closer than the sum of their radii overlap and are
        rejected. Only the distances between well centres enter the matrix.
    names : sequence of str, optional
        Well names for messages (default: "well 1", "well 2", ...).

    Returns
    -------
    ndarray, shape (n_wells, n_wells)
        A [m per m^3/d]: A[i, j] is the drawdown at well i per unit extraction rate of well j;
        the diagonal is zero.

    Raises
    ------
    InputError
        Non-finite or mismatched coordinates; coincident or overlapping wells; a
        transmissivity, storativity, time or radius that is not positive (storativity above
        1); neither or both of the Theis and Thiem inputs.

    Notes
    -----
    With r_ij the distance between wells i and j (i != j):

    Theis:  A_ij = W(u_ij) / (4 pi T),  u_ij = r_ij^2 S / (4 T t),  W(u) = E1(u)

    Thiem:  A_ij = ln(R / r_ij) / (2 pi T)  for r_ij < R,  else 0

    The wells are taken as fully penetrating one equivalent aquifer for interference; the
    zone-by-zone distribution of the interference is neglected (module docstring).

    References
    ----------
    Theis, C.V. (1935) Trans. AGU 16(2), 519-524.
    Thiem, G. (1906) Hydrologische Methoden. Gebhardt, Leipzig.
    Kruseman, G.P. and de Ridder, N.A. (1990) ILRI Publication 47 (confined aquifers).
    """
    xs = np.atleast_1d(np.asarray(x, float))
    ys = np.atleast_1d(np.asarray(y, float))
    if xs.ndim != 1 or xs.shape != ys.shape:
        raise InputError(f"well coordinates x {xs.shape} and y {ys.shape} must be two lists of "
                         "the same length", field="x, y")
    n = len(xs)
    labels = list(names) if names is not None else [f"well {k + 1}" for k in range(n)]
    if len(labels) != n:
        raise InputError(f"{len(labels)} well names for {n} wells", field="names")
    for k in range(n):
        if not (np.isfinite(xs[k]) and np.isfinite(ys[k])):
            raise InputError(f"{labels[k]}: coordinates ({xs[k]}, {ys[k]}) m are not finite",
                             field="x, y")
    transmissivity = _positive(transmissivity, "transmissivity", "m^2/d")
    try:
        rw = np.broadcast_to(np.asarray(well_radius, float), (n,))
    except ValueError:
        raise InputError(f"well radii of shape {np.shape(well_radius)} for {n} wells",
                         field="well_radius") from None
    for k in range(n):
        if not (np.isfinite(rw[k]) and rw[k] >= 0.0):
            raise InputError(f"{labels[k]}: well radius {rw[k]} m is not a finite value >= 0",
                             field="well_radius")

    theis = storativity is not None or time is not None
    if theis and radius_of_influence is not None:
        raise InputError("give either storativity and time (Theis) or radius_of_influence "
                         "(Thiem), not both", field="radius_of_influence")
    if theis:
        if storativity is None or time is None:
            missing = "storativity" if storativity is None else "time"
            raise InputError(f"the Theis solution needs both storativity and time; {missing} "
                             "is missing", field=missing)
        storativity = _positive(storativity, "storativity", "-")
        if storativity > 1.0:
            raise InputError(f"storativity {storativity} is above 1", field="storativity")
        time = _positive(time, "time", "d")
    elif radius_of_influence is None:
        raise InputError("give storativity and time (Theis) or radius_of_influence (Thiem)",
                         field="radius_of_influence")
    else:
        radius_of_influence = _positive(radius_of_influence, "radius_of_influence", "m")
        if n and radius_of_influence <= rw.max():
            raise InputError(f"radius of influence {radius_of_influence} m is not larger than "
                             f"the well radius {rw.max()} m", field="radius_of_influence")

    r = np.hypot(xs[:, None] - xs[None, :], ys[:, None] - ys[None, :])
    off = ~np.eye(n, dtype=bool)
    overlap = off & (r <= rw[:, None] + rw[None, :])
    if overlap.any():
        i, j = (int(v) for v in np.argwhere(np.triu(overlap))[0])
        what = "coincide" if r[i, j] == 0.0 else "overlap"
        raise InputError(f"{labels[i]} and {labels[j]} {what}: {r[i, j]:g} m apart, radii "
                         f"{rw[i]:g} and {rw[j]:g} m", field="x, y")

    a = np.zeros((n, n))
    if theis:
        u = r[off] ** 2 * storativity / (4.0 * transmissivity * time)
        a[off] = theis_well_function(u) / (4.0 * np.pi * transmissivity)
    else:
        inside = off & (r < radius_of_influence)
        a[inside] = np.log(radius_of_influence / r[inside]) / (2.0 * np.pi * transmissivity)
    return a


def interference_drawdown(interference: ArrayLike, rates: ArrayLike) -> np.ndarray:
    """Drawdown at each well caused by the pumping of the others (superposition).

    Parameters
    ----------
    interference : array, shape (n_wells, n_wells)
        Interference matrix A [m per m^3/d] of :func:`interference_matrix`.
    rates : array, shape (..., n_wells)
        Extraction rate of each well [m^3/d] (positive out of the aquifer); leading
        dimensions are batches (for example draws or rate sets).

    Returns
    -------
    ndarray, shape (..., n_wells)
        Interference drawdown at each well [m]: s_i = sum_j A_ij Q_j.

    Raises
    ------
    InputError
        A not square, or rates whose last dimension is not the number of wells.

    References
    ----------
    Kruseman, G.P. and de Ridder, N.A. (1990) ILRI Publication 47 (superposition of well
    drawdowns in a linear aquifer).
    """
    a = np.asarray(interference, float)
    q = np.asarray(rates, float)
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise InputError(f"interference matrix of shape {a.shape} is not square",
                         field="interference")
    if q.ndim < 1 or q.shape[-1] != a.shape[0]:
        raise InputError(f"rates of shape {q.shape} do not give one rate per well for "
                         f"{a.shape[0]} wells", field="rates")
    return q @ a.T


def _positive(value, field: str, unit: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = float("nan")
    if not (np.isfinite(v) and v > 0.0):
        raise InputError(f"{field} {value!r} [{unit}] is not a positive finite number",
                         field=field)
    return v
