"""A multi-zone supply well built in timml (PyPI), as an outside reference for blendq.

timml (Bakker, analytic-element multi-aquifer model) solves steady flow in a stack of aquifers
separated by leaky aquitards. Here each blendq zone is one timml aquifer layer; the aquitards
get a very large resistance so that the layers are joined only through the well, as blendq
assumes. The static head of each layer is fixed at radius R by a closed ring of head-specified
line sinks (timml ``RiverString``) in that layer alone. The well (timml ``Well``) is screened in
all layers with a given total discharge; timml distributes it so that the head inside the well
is the same in every screened layer.

Screen resistance and skin. In timml's ``Well`` (well.py, ``WellBase.initialize``) the head
inside the well is h_w = h(r_w) - Q_i res / (2 pi r_w H_i), with ``res`` [d] the resistance of
the screen and H_i the layer thickness. A skin factor s_i adds Q_i s_i / (2 pi T_i) to the
Thiem drawdown (Hawkins 1956), with T_i = K_i H_i. Equating the two,

    res / (2 pi r_w H_i) = s_i / (2 pi K_i H_i)   =>   s_i = K_i res / r_w.

timml 6.9 takes one ``res`` per well, so the equivalent skin still differs between layers
through K_i.
"""

from __future__ import annotations

import warnings

import numpy as np


def equivalent_skin(conductivity, screen_resistance, well_radius):
    """Skin factor [-] equivalent to timml's screen resistance: s_i = K_i res / r_w."""
    return np.asarray(conductivity, float) * screen_resistance / well_radius


def timml_zone_flows(
    rate: float,
    conductivity,
    thickness,
    static_head,
    radius_of_influence: float,
    well_radius: float,
    screen_resistance: float = 0.0,
    aquitard_resistance: float = 1e9,
    aquitard_thickness: float = 5.0,
    n_ring: int = 40,
):
    """Per-layer discharge [m^3/d] and head inside the well [m] from a timml model.

    Parameters
    ----------
    rate : float
        Total well discharge Q [m^3/d] (timml: positive is extraction).
    conductivity, thickness, static_head : array_like, shape (n_layers,)
        K_i [m/d], H_i [m] and the head fixed at radius R in each layer [m].
    radius_of_influence : float
        R [m]: the ring's line sinks have their control points (segment midpoints) at R.
    well_radius : float
        r_w [m].
    screen_resistance : float
        timml ``res`` [d].
    aquitard_resistance : float
        Vertical resistance c of each aquitard [d]; large means nearly independent layers.
    n_ring : int
        Number of line sinks in each ring.

    Returns
    -------
    discharge : ndarray, shape (n_layers,)
    head_inside : float
    """
    import timml

    k = np.asarray(conductivity, float)
    h = np.asarray(thickness, float)
    h0 = np.asarray(static_head, float)
    n = len(k)
    # layer elevations: aquifer, aquitard, aquifer, ... from the top down
    z = [0.0]
    for i in range(n):
        z.append(z[-1] - h[i])
        if i < n - 1:
            z.append(z[-1] - aquitard_thickness)
    model = timml.ModelMaq(kaq=k, z=z, c=[aquitard_resistance] * (n - 1), topboundary="conf")
    # vertices on radius R / cos(pi/N) put each segment's midpoint (its control point) at R
    angle = np.linspace(0.0, 2.0 * np.pi, n_ring + 1)
    vertex_radius = radius_of_influence / np.cos(np.pi / n_ring)
    ring = list(zip(vertex_radius * np.cos(angle), vertex_radius * np.sin(angle), strict=True))
    for i in range(n):
        timml.RiverString(model, xy=ring, hls=h0[i], layers=i)
    well = timml.Well(model, 0.0, 0.0, Qw=rate, rw=well_radius, res=screen_resistance,
                      layers=list(range(n)))
    with warnings.catch_warnings():
        # timml 6.9 calls numpy in ways numpy 2.x deprecates; the results are unaffected
        warnings.simplefilter("ignore", DeprecationWarning)
        model.solve(silent=True)
    return np.asarray(well.discharge(), float), float(well.headinside()[0])
