"""Wellbore mixing: which zone's water reaches the pump, and what flows past any depth.

The well is a line of nodes ordered by depth: one node per zone (at the zone's mid-depth) and
one for the pump intake. Within a zone's open interval the zone's inflow enters spread over the
interval in proportion to conductivity times thickness (uniform unless sub-layers are given), so
the flow past a depth inside a screen rises linearly through a uniform zone
(:func:`wellbore_flow`), and the water passing it holds the part of the zone's water that has
entered on the upstream side (:func:`wellbore_composition`). The wellbore is closed above the top node and below the bottom node,
so the flow in each segment follows from the zone flows by mass balance. Where streams meet
they mix completely; steady flow, no reaction. The water leaving a node (down the well, up the
well, into a thief zone or into the pump) has the node's mixed composition. Because the nodes
lie on a line, the balance is solved exactly in two sweeps (top-down for downward streams,
bottom-up for upward streams), vectorised over all leading dimensions.

The discharge concentration of analyte j is then linear in the zone concentrations:
C_j(Q) = sum_i a_i(Q) c_ij with weights a_i >= 0, sum a_i = 1 for Q > 0.

References
----------
Konikow, L.F., Hornberger, G.Z., Halford, K.J., Hanson, R.T. (2009) USGS TM 6-A30 (intraborehole
flow in multi-node wells). Izbicki, J.A., Christensen, A.H., Hanson, R.T. (1999) U.S. Geological
Survey combined well-bore flow and depth-dependent water sampler. USGS Fact Sheet 196-99.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

INTAKE = -1  #: node code of the pump intake in :attr:`WellGeometry.nodes`


@dataclass(frozen=True)
class WellGeometry:
    """Depth layout of the zones and the pump intake.

    Parameters
    ----------
    zone_top, zone_bottom : array_like, shape (n_zones,)
        Depth of each zone's top and bottom [m below datum], top < bottom.
    intake_depth : float
        Depth of the pump intake [m below datum].
    sublayers : tuple, optional
        Per zone, None (inflow uniform over the open interval) or an array of rows
        (top [m], bottom [m], conductivity [m/d]) of sub-layers inside the zone: the zone's
        inflow is shared among them in proportion to conductivity times thickness, and is
        uniform within each; parts of the interval outside every sub-layer give no water.
    """

    zone_top: np.ndarray
    zone_bottom: np.ndarray
    intake_depth: float
    sublayers: tuple | None = None

    def __post_init__(self):
        object.__setattr__(self, "zone_top", np.asarray(self.zone_top, float))
        object.__setattr__(self, "zone_bottom", np.asarray(self.zone_bottom, float))

    def fraction_above(self, depth) -> np.ndarray:
        """Share of each zone's inflow that enters the well above each depth [-].

        Parameters
        ----------
        depth : array_like (n_depths,)
            Depths [m below datum].

        Returns
        -------
        ndarray (n_depths, n_zones)
            0 above the zone, 1 below it; inside the open interval the cumulative share of
            conductivity times thickness from the top (linear for a uniform zone).
        """
        depth = np.atleast_1d(np.asarray(depth, float))
        out = np.empty((len(depth), self.n_zones))
        for i in range(self.n_zones):
            layers = None if self.sublayers is None else self.sublayers[i]
            if layers is None or len(layers) == 0:
                d = [self.zone_top[i], self.zone_bottom[i]]
                c = [0.0, 1.0]
            else:
                rows = np.asarray(layers, float)
                rows = rows[np.argsort(rows[:, 0])]
                kb = rows[:, 2] * (rows[:, 1] - rows[:, 0])
                cum = np.concatenate([[0.0], np.cumsum(kb)]) / kb.sum()
                d = np.ravel(rows[:, :2])
                c = np.ravel(np.column_stack([cum[:-1], cum[1:]]))
            out[:, i] = np.interp(depth, d, c, left=0.0, right=1.0)
        return out

    @property
    def n_zones(self) -> int:
        return len(self.zone_top)

    @property
    def nodes(self) -> list[int]:
        """Node codes ordered top to bottom: a zone index, or :data:`INTAKE`."""
        mid = 0.5 * (self.zone_top + self.zone_bottom)
        depth = list(mid) + [float(self.intake_depth)]
        code = list(range(self.n_zones)) + [INTAKE]
        order = sorted(range(len(code)), key=lambda k: (depth[k], k))
        return [code[k] for k in order]

    @property
    def node_depth(self) -> np.ndarray:
        mid = 0.5 * (self.zone_top + self.zone_bottom)
        return np.array([self.intake_depth if c == INTAKE else mid[c] for c in self.nodes])


def _node_inflow(flows, code):
    """Net inflow to the wellbore at a node: zone flow, or minus the pumping rate at the intake."""
    if code == INTAKE:
        return -flows.sum(-1)
    return flows[..., code]


def _sweeps(flows, geometry: WellGeometry, zone_values):
    """Segment flows and compositions of downward and upward streams at every node.

    Returns
    -------
    seg_down : list of arrays (...,)
        Downward flow in the segment below node k (k = 0 .. N-2) [m^3/d].
    comp_down : list of arrays (..., m)
        Composition of the water leaving node k downward.
    comp_up : list of arrays (..., m)
        Composition of the water leaving node k upward.
    """
    nodes = geometry.nodes
    n_nodes = len(nodes)
    inflow = [_node_inflow(flows, c) for c in nodes]
    seg_down = []
    running = np.zeros(flows.shape[:-1])
    for k in range(n_nodes - 1):
        running = running + inflow[k]
        seg_down.append(running)
    zero = np.zeros(flows.shape[:-1] + zone_values.shape[-1:])

    def own(k):
        c = nodes[k]
        if c == INTAKE:
            return np.zeros(flows.shape[:-1]), zero
        return np.maximum(flows[..., c], 0.0), zone_values[..., c, :]

    comp_down = [None] * n_nodes
    prev_flow, prev_comp = np.zeros(flows.shape[:-1]), zero
    for k in range(n_nodes):
        q_own, c_own = own(k)
        total = prev_flow + q_own
        with np.errstate(invalid="ignore", divide="ignore"):
            comp = (prev_flow[..., None] * prev_comp + q_own[..., None] * c_own) / total[..., None]
        comp_down[k] = np.where(total[..., None] > 0, comp, np.nan)
        if k < n_nodes - 1:
            # a node that receives no water cannot pass any on: a segment flow there is
            # rounding (for example at Q = 0, where the zone flows sum to +-1e-16) and would
            # carry the node's undefined (NaN) composition down the well
            prev_flow = np.where(total > 0, np.maximum(seg_down[k], 0.0), 0.0)
            prev_comp = np.where(prev_flow[..., None] > 0, comp_down[k], 0.0)
    comp_up = [None] * n_nodes
    prev_flow, prev_comp = np.zeros(flows.shape[:-1]), zero
    for k in range(n_nodes - 1, -1, -1):
        q_own, c_own = own(k)
        total = prev_flow + q_own
        with np.errstate(invalid="ignore", divide="ignore"):
            comp = (prev_flow[..., None] * prev_comp + q_own[..., None] * c_own) / total[..., None]
        comp_up[k] = np.where(total[..., None] > 0, comp, np.nan)
        if k > 0:
            prev_flow = np.where(total > 0, np.maximum(-seg_down[k - 1], 0.0), 0.0)
            prev_comp = np.where(prev_flow[..., None] > 0, comp_up[k], 0.0)
    return seg_down, comp_down, comp_up


def _as_values(flows, zone_values):
    n = flows.shape[-1]
    if zone_values is None:
        return np.eye(n)
    v = np.asarray(zone_values, float)
    if v.ndim == 1:
        v = v[:, None]
    return v


def discharge_composition(flows, geometry: WellGeometry, zone_values=None):
    """Composition of the pumped water for given zone flows.

    Parameters
    ----------
    flows : array_like, shape (..., n_zones)
        Zone inflows q_i [m^3/d] (negative for a thief zone); the pumping rate is their sum.
    geometry : WellGeometry
    zone_values : array_like, shape (..., n_zones, m) or (n_zones,), optional
        Value carried by each zone's water (concentrations of m analytes). Default: the identity,
        which returns the discharge weights a_i.

    Returns
    -------
    ndarray, shape (..., m)
        Flow-weighted composition at the intake; NaN where the pumping rate is zero (a sum
        of zone flows below 1e-9 of the zone flows' absolute sum counts as zero: that is
        rounding left by the wellbore-head solution at Q = 0).
    """
    flows = np.asarray(flows, float)
    values = _as_values(flows, zone_values)
    seg_down, comp_down, comp_up = _sweeps(flows, geometry, values)
    k = geometry.nodes.index(INTAKE)
    parts = []
    weights = []
    if k > 0:
        w = np.maximum(seg_down[k - 1], 0.0)
        weights.append(w)
        parts.append(np.where(w[..., None] > 0, comp_down[k - 1], 0.0))
    if k < len(geometry.nodes) - 1:
        w = np.maximum(-seg_down[k], 0.0)
        weights.append(w)
        parts.append(np.where(w[..., None] > 0, comp_up[k + 1], 0.0))
    total = sum(weights)
    with np.errstate(invalid="ignore", divide="ignore"):
        mix = sum(w[..., None] * p for w, p in zip(weights, parts, strict=True)) / total[..., None]
    pumped = flows.sum(-1) > 1e-9 * np.abs(flows).sum(-1)
    return np.where((total[..., None] > 0) & pumped[..., None], mix, np.nan)


def discharge_weights(flows, geometry: WellGeometry):
    """Discharge weight a_i of each zone (..., n_zones): >= 0, summing to 1 where Q > 0.

    Computed by :func:`intake_weights` (pass-through fractions); NaN where the pumping rate is
    zero.
    """
    return intake_weights(flows, geometry)


def intake_weights(flows, geometry) -> np.ndarray:
    """Discharge weights a_i from zone flows by pass-through fractions, shape (..., n_zones).

    The same quantity as :func:`discharge_composition` with the identity as zone values
    (complete mixing at each node of the wellbore, steady flow), computed with O(n) work per
    rate instead of carrying a full composition vector through every node. NaN where the
    pumping rate is zero.

    Notes
    -----
    A node's water leaves in proportion to its outflows, so the part of zone i's inflow
    q_i^+ that reaches the intake is q_i^+ times, for every node on the way (zone i's node
    included, the intake excluded), the fraction of that node's water that flows on towards
    the intake; the intake pumps the same fraction Q / T_in of all the water T_in arriving at
    it, so

        a_i = q_i^+ prod_k (F_k / T_k) / T_in

    with T_k the water entering node k (its own inflow plus the stream arriving from the side
    away from the intake) and F_k the segment flow leaving it towards the intake.

    References
    ----------
    Konikow, Hornberger, Halford and Hanson (2009) USGS TM 6-A30 (intraborehole flow between
    the nodes of a multi-node well).
    """
    flows = np.asarray(flows, float)
    parts = intake_weights_by_zone([flows[..., i] for i in range(flows.shape[-1])], geometry)
    return np.stack(parts, axis=-1)


def intake_weights_by_zone(flows: list, geometry) -> list:
    """:func:`intake_weights` on one array per zone (any common shape), returning one array of
    weights per zone: the layout a sweep uses so that every pass runs over contiguous memory."""
    nodes = geometry.nodes
    k_in = nodes.index(INTAKE)
    rate = sum(flows)
    inflow = [np.maximum(f, 0.0) for f in flows]
    # downward flow in the segment below node k, k = 0 .. N-2 (node inflow summed from the top)
    seg_down = []
    running = np.zeros_like(rate)
    for code in nodes[:-1]:
        running = running + (-rate if code == INTAKE else flows[code])
        seg_down.append(running)
    out = [np.zeros_like(rate) for _ in flows]
    with np.errstate(invalid="ignore", divide="ignore"):
        # above the intake: walk up from it; water moves down
        passed = np.ones_like(rate)
        for k in range(k_in - 1, -1, -1):
            i = nodes[k]
            from_above = np.maximum(seg_down[k - 1], 0.0) if k > 0 else 0.0
            total = from_above + inflow[i]
            passed = passed * np.where(total > 0, np.maximum(seg_down[k], 0.0) / total, 0.0)
            out[i] = inflow[i] * passed
        # below the intake: walk down from it; water moves up
        passed = np.ones_like(rate)
        for k in range(k_in + 1, len(nodes)):
            i = nodes[k]
            from_below = np.maximum(-seg_down[k], 0.0) if k < len(nodes) - 1 else 0.0
            total = from_below + inflow[i]
            passed = passed * np.where(total > 0, np.maximum(-seg_down[k - 1], 0.0) / total, 0.0)
            out[i] = inflow[i] * passed
        # the intake mixes what arrives from both sides; part of it may pass on to a thief
        arriving = (np.maximum(seg_down[k_in - 1], 0.0) if k_in > 0 else 0.0) + (
            np.maximum(-seg_down[k_in], 0.0) if k_in < len(nodes) - 1 else 0.0)
        scale = sum(np.abs(f) for f in flows)
        pumped = (rate > 1e-9 * scale) & (arriving > 0)
        return [np.where(pumped, o / arriving, np.nan) for o in out]


def wellbore_flow(flows, geometry: WellGeometry, depth):
    """Upward flow in the well at each depth [m^3/d] (positive up), shape (..., n_depths).

    Above the top zone and below the bottom zone the well is stagnant (zero flow). Inside a
    zone's open interval the flow changes gradually: the zone's inflow enters spread over the
    interval (:meth:`WellGeometry.fraction_above`), so through a uniform zone the flow is linear
    in depth. The intake removes the pumping rate at its depth (a depth at the intake counts
    as below it).

    Notes
    -----
    Mass balance from the closed top of the well: the downward flow at depth z is
    sum_i q_i f_i(z) - Q [z_intake <= z], with f_i(z) the share of zone i's inflow entering
    above z; the upward flow is its negative.
    """
    flows = np.asarray(flows, float)
    depth = np.atleast_1d(np.asarray(depth, float))
    nodes = geometry.nodes
    nd = geometry.node_depth
    running = np.zeros(flows.shape[:-1])
    seg = [np.zeros(flows.shape[:-1])]
    for c in nodes:
        running = running + _node_inflow(flows, c)
        seg.append(running.copy())
    seg[-1] = np.zeros(flows.shape[:-1])
    seg_arr = np.stack(seg, -1)  # downward flow in segments 0 (above top node) .. N (below bottom)
    idx = np.searchsorted(nd, depth, side="right")
    down = seg_arr[..., idx]
    # inside an open interval: the part of the zone's inflow on the other side of its node
    frac = geometry.fraction_above(depth)  # (n_depths, n_zones)
    mid = 0.5 * (geometry.zone_top + geometry.zone_bottom)
    counted = (mid[None, :] <= depth[:, None]).astype(float)  # node counted above the depth
    inside = (geometry.zone_top[None, :] < depth[:, None]) & (depth[:, None] < geometry.zone_bottom)
    corr = np.where(inside, frac - counted, 0.0)
    if np.any(corr != 0.0):
        down = down + np.einsum("...n,dn->...d", flows, corr)
    return -down


def _split_zone(flows, geometry: WellGeometry, values, depth: float):
    """Zone flows, geometry and values with the zone whose open interval holds ``depth`` split
    there into two zones (the parts of its inflow entering above and below ``depth``), or None
    when ``depth`` is in no open interval."""
    inside = np.flatnonzero((geometry.zone_top < depth) & (depth < geometry.zone_bottom))
    if len(inside) == 0:
        return None
    i = int(inside[0])
    f = float(geometry.fraction_above([depth])[0, i])
    q = flows[..., i:i + 1]
    flows2 = np.concatenate([flows[..., :i], q * f, q * (1.0 - f), flows[..., i + 1:]], -1)
    top = np.concatenate([geometry.zone_top[:i], [geometry.zone_top[i], depth],
                          geometry.zone_top[i + 1:]])
    bot = np.concatenate([geometry.zone_bottom[:i], [depth, geometry.zone_bottom[i]],
                          geometry.zone_bottom[i + 1:]])
    values2 = np.concatenate([values[..., :i + 1, :], values[..., i:, :]], -2)
    return flows2, WellGeometry(top, bot, geometry.intake_depth), values2


def wellbore_composition(flows, geometry: WellGeometry, depth, zone_values=None):
    """Composition of the water flowing past each depth in the well, shape (..., n_depths, m).

    Where the water is stagnant (no flow in that segment) the composition is NaN: a sample there
    says nothing about the zones. A depth that coincides with a node belongs to the segment below.
    A depth inside a zone's open interval sees the part of the zone's inflow that entered on the
    upstream side of it: the zone is split there into two parts carrying the same water, with
    the flows of :meth:`WellGeometry.fraction_above`.
    """
    flows = np.asarray(flows, float)
    values = _as_values(flows, zone_values)
    depth = np.atleast_1d(np.asarray(depth, float))
    m = values.shape[-1]
    out = np.full(flows.shape[:-1] + (len(depth), m), np.nan)
    plain = None
    for j, z in enumerate(depth):
        split = _split_zone(flows, geometry, values, float(z))
        if split is None:
            if plain is None:
                plain = _sweeps(flows, geometry, values)
            f, g, sweeps = flows, geometry, plain
        else:
            f, g, v = split
            sweeps = _sweeps(f, g, v)
        seg_down, comp_down, comp_up = sweeps
        nd = g.node_depth
        s = int(np.searchsorted(nd, z, side="right"))  # segment between nodes s-1 and s
        if s == 0 or s == len(nd):
            continue
        down = seg_down[s - 1]
        out[..., j, :] = np.where(down[..., None] > 0, comp_down[s - 1],
                                  np.where(down[..., None] < 0, comp_up[s], np.nan))
    return out


def intake_weights_jacobian(flows, geometry) -> tuple[np.ndarray, np.ndarray]:
    """Discharge weights a_i and their derivatives da_i/dq_j by the zone flows.

    Parameters
    ----------
    flows : array_like, shape (..., n_zones)
        Zone inflows q_j [m^3/d] (negative for a thief zone).
    geometry : WellGeometry

    Returns
    -------
    weights : ndarray (..., n_zones)
        :func:`intake_weights` (NaN where nothing is pumped).
    jacobian : ndarray (..., n_zones, n_zones)
        da_i/dq_j [d/m^3] (NaN where nothing is pumped). At a kink (a zone flow or a segment
        flow exactly zero) the derivative of the side the flows are on (the branch the
        weights themselves take).

    Notes
    -----
    Forward differentiation of the pass-through products of :func:`intake_weights` (the same
    sweep, carrying the n derivatives of every quantity with it): the segment flows are
    partial sums of the zone flows and of minus the pumping rate Q = sum_j q_j, so their
    derivatives are constant vectors of 0, 1 and -1.

    References
    ----------
    Konikow, Hornberger, Halford and Hanson (2009) USGS TM 6-A30 (intraborehole flow between
    the nodes of a multi-node well).
    """
    flows = np.asarray(flows, float)
    n = flows.shape[-1]
    nodes = geometry.nodes
    k_in = nodes.index(INTAKE)
    rate = flows.sum(-1)
    eye = np.eye(n)
    inflow = np.maximum(flows, 0.0)
    d_inflow = (flows > 0)[..., :, None] * eye  # (..., n, n): d inflow_i / dq_j
    # downward flow in the segment below node k and its (constant) derivative
    seg, d_seg = [], []
    running = np.zeros_like(rate)
    d_running = np.zeros(n)
    for code in nodes[:-1]:
        if code == INTAKE:
            running = running - rate
            d_running = d_running - 1.0
        else:
            running = running + flows[..., code]
            d_running = d_running + eye[code]
        seg.append(running)
        d_seg.append(d_running)
    out = np.zeros(flows.shape)
    d_out = np.zeros(flows.shape + (n,))

    def down(k):  # max(seg_down[k], 0) and its derivative
        pos = seg[k] > 0
        return np.where(pos, seg[k], 0.0), pos[..., None] * d_seg[k]

    def up(k):  # max(-seg_down[k], 0) and its derivative
        neg = seg[k] < 0
        return np.where(neg, -seg[k], 0.0), neg[..., None] * -d_seg[k]

    with np.errstate(invalid="ignore", divide="ignore"):
        for side in (range(k_in - 1, -1, -1), range(k_in + 1, len(nodes))):
            passed = np.ones_like(rate)
            d_passed = np.zeros(rate.shape + (n,))
            for k in side:
                i = nodes[k]
                if k < k_in:  # above the intake: water moves down
                    arrive, d_arrive = down(k - 1) if k > 0 else (0.0, 0.0)
                    leave, d_leave = down(k)
                else:  # below: water moves up
                    arrive, d_arrive = up(k) if k < len(nodes) - 1 else (0.0, 0.0)
                    leave, d_leave = up(k - 1)
                total = arrive + inflow[..., i]
                d_total = d_arrive + d_inflow[..., i, :]
                ok = total > 0
                t = np.where(ok, total, 1.0)
                ratio = np.where(ok, leave / t, 0.0)
                d_ratio = np.where(ok[..., None],
                                   (d_leave - ratio[..., None] * d_total) / t[..., None], 0.0)
                d_passed = d_passed * ratio[..., None] + passed[..., None] * d_ratio
                passed = passed * ratio
                out[..., i] = inflow[..., i] * passed
                d_out[..., i, :] = d_inflow[..., i, :] * passed[..., None] \
                    + inflow[..., i, None] * d_passed
        a_down, d_a_down = down(k_in - 1) if k_in > 0 else (0.0, 0.0)
        a_up, d_a_up = up(k_in) if k_in < len(nodes) - 1 else (0.0, 0.0)
        arriving = a_down + a_up
        d_arriving = d_a_down + d_a_up
        scale = np.abs(flows).sum(-1)
        pumped = (rate > 1e-9 * scale) & (arriving > 0)
        w = out / arriving[..., None]
        jac = (d_out - w[..., None] * np.asarray(d_arriving)[..., None, :]) \
            / arriving[..., None, None]
        return (np.where(pumped[..., None], w, np.nan),
                np.where(pumped[..., None, None], jac, np.nan))
