"""3-D linear-elastic solid model of a carved bar, with a mesh-convergence error estimate.

The 1-D model (:mod:`synth.physics.bar_fe`) assumes plane sections, a shear coefficient
and St Venant torsion; on thick, wide bars that costs tens of cents in the upper partials.
This module solves the bar as what it is: an isotropic elastic solid, free on every face.

Geometry
    Length along x (0 .. L), width along y (0 .. b), the flat top face at z = h0 (the
    blank thickness) and the underside at z = h0 - h(x), where h(x) is
    :meth:`BarGeometry.thickness_at` (any undercut: station tables, arches centred or
    not, flat-bottomed arches, ground bands). Element edges along x fall on every
    breakpoint of the profile; a step (a ground band's edge) is meshed exactly by extra
    element layers below the thinner side.

Discretisation
    27-node triquadratic Lagrange hexahedra on isoparametric quadratic geometry
    (scikit-fem ``ElementHex2`` on ``MeshHex2``) [1]_ [2]_. Element matrices are formed by
    batched matrix products over all elements at once and summed into ``scipy.sparse``
    matrices. The bar is symmetric about its mid-width plane, so the modes symmetric about
    it (vertical, longitudinal) and those antisymmetric (lateral, torsional) are solved
    separately on half the width.

Solution
    ``K u = omega^2 M u`` by ``scipy.sparse.linalg.eigsh`` in shift-invert mode about a
    small negative shift [3]_; the rigid-body modes come first and are checked and dropped.

Mode identification
    Each mode's kinetic energy is split into section motions: translation of the section
    in z and its turn about y (vertical), translation in y and turn about z (lateral),
    rotation about x (torsional), mean axial motion (longitudinal). The largest share
    names the kind when it holds at least half the energy and agrees with the mode's
    mirror symmetry; otherwise the mode is ``other``
    (plate-like modes across the width). Orders count modes of one kind by frequency.

Error estimate
    A bar is solved on two or three mesh levels; the grid-convergence index of Roache
    [4]_ bounds the relative error of the finest level: with three levels the observed
    order p follows from the three frequencies (Celik et al. [5]_, eqs. 3-4) and the
    safety factor is 1.25; with two levels, or when the three do not converge
    monotonically, p is the theoretical order 4 (quadratic elements: eigenvalue error
    O(h^4) [1]_, ch. 16) and the safety factor 3. The Richardson extrapolation
    ``(r^p f1 - f2) / (r^p - 1)`` is reported beside the finest frequency.

References
----------
.. [1] Zienkiewicz, O. C., Taylor, R. L. and Zhu, J. Z., "The Finite Element Method: Its
   Basis and Fundamentals", 7th ed., Butterworth-Heinemann, 2013, ISBN 978-1-85617-633-0,
   ch. 6 (isoparametric elements), ch. 16 (free vibration of elastic solids).
.. [2] Gustafsson, T. and McBain, G. D., "scikit-fem: A Python package for finite element
   assembly", Journal of Open Source Software 5(52), 2369, 2020, doi:10.21105/joss.02369.
.. [3] Lehoucq, R. B., Sorensen, D. C. and Yang, C., "ARPACK Users' Guide", SIAM, 1998,
   ISBN 978-0-89871-407-4, sec. 3.2 (shift-invert spectral transformation).
.. [4] Roache, P. J., "Perspective: A method for uniform reporting of grid refinement
   studies", J. Fluids Eng. 116(3), 405-413, 1994, doi:10.1115/1.2910291.
.. [5] Celik, I. B. et al., "Procedure for estimation and reporting of uncertainty due to
   discretization in CFD applications", J. Fluids Eng. 130(7), 078001, 2008,
   doi:10.1115/1.2960953.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from synth.errors import ModelError
from synth.physics.geometry import BarGeometry
from synth.physics.materials import Material

KINDS: tuple[str, ...] = ("vertical", "lateral", "torsional", "longitudinal", "other")
"""Mode kinds the solid model tells apart."""

MIN_LEVEL = 1
MAX_LEVEL = 8
"""Mesh levels: level m has about m elements through the thickness (see :func:`mesh_counts`)."""

THEORETICAL_ORDER = 4.0
"""Convergence order of the frequencies with quadratic elements (eigenvalue error O(h^4),
[1]_ ch. 16; measured on a smooth arch in tests/solid/)."""

SAFETY_THREE_LEVELS = 1.25
SAFETY_TWO_LEVELS = 3.0
"""Safety factors of the grid-convergence index: 1.25 with an observed order from three
levels, 3 with an assumed order from two (Roache 1994 [4]_)."""

CACHE_ENV = "BARWRIGHT_CACHE"
"""Environment variable naming the folder of finished 3-D solves (default
``$XDG_CACHE_HOME/barwright`` or ``~/.cache/barwright``)."""

MODEL_VERSION = 3
"""Part of every cache key: raise it when a change to this module changes results."""


# ---------------------------------------------------------------------------------------
# Mesh sizes
# ---------------------------------------------------------------------------------------


def mesh_counts(geometry: BarGeometry, level: int) -> tuple[int, int, int]:
    """Element counts (along x, across the whole width, through the thickness) of a level.

    Level m puts m quadratic elements through the blank thickness h0 and keeps elements
    about 2 h0 / m long (8 m along the bar at least) and 2 h0 / m wide: every count is m
    times that of level 1, so the mesh size of the error estimate scales as 1/m.

    Parameters
    ----------
    geometry : BarGeometry
        The bar.
    level : int
        From :data:`MIN_LEVEL` to :data:`MAX_LEVEL`.

    Returns
    -------
    (nx, ny, nz) : tuple of int
        ``ny`` is even (the mid-width plane is a mesh plane).
    """
    if not MIN_LEVEL <= level <= MAX_LEVEL:
        raise ModelError(f"mesh level {level}: must be {MIN_LEVEL} to {MAX_LEVEL}")
    h0 = geometry.thickness_m
    # level 1 has elements about 2 h0 long (at least 8 along the bar: vertical partial 3
    # of a short bar has four half-waves) and 2 h0 wide; level m divides each by m, so
    # that the mesh size of the error estimate scales exactly as 1/m
    nx = level * max(8, math.ceil(geometry.length_m / (2.0 * h0) - 1e-9))
    half = level * max(1, round(geometry.width_m / (4.0 * h0)))
    return nx, 2 * half, level


# ---------------------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SolidMode:
    """One elastic mode of one mesh level.

    Attributes
    ----------
    frequency_hz : float
        Natural frequency, Hz.
    kind : str
        One of :data:`KINDS`.
    order : int
        Position among the modes of the same kind by frequency, 1-based.
    mirror_symmetry : float
        1 for modes symmetric about the mid-width plane, 0 antisymmetric.
    share : float
        Kinetic-energy share of the section motion that names the kind (0..1).
    nodes_m : tuple of float
        Vertical modes: zero crossings of u_z along the top face's centre line, m from the
        left end. Empty for other kinds.
    """

    frequency_hz: float
    kind: str
    order: int
    mirror_symmetry: float
    share: float
    nodes_m: tuple[float, ...] = ()


@dataclass(frozen=True)
class LevelSolve:
    """The modes of one bar on one mesh level.

    Attributes
    ----------
    level : int
    counts : (nx, ny, nz)
        Element counts (:func:`mesh_counts`).
    n_elements : int
        Hexahedra in the whole bar (both halves), the measure of the mesh size.
    n_dof : int
        Unknowns solved (both half-width problems).
    modes : tuple of SolidMode
        By increasing frequency.
    mass_kg : float
        Mass integrated over the mesh, kg.
    seconds : float
        Wall time of mesh, assembly and eigensolution (not compared).
    """

    level: int
    counts: tuple[int, int, int]
    n_elements: int
    n_dof: int
    modes: tuple[SolidMode, ...]
    mass_kg: float
    seconds: float = field(default=0.0, compare=False)

    def mode(self, kind: str, order: int) -> SolidMode:
        """Return the ``order``-th mode of ``kind``; LookupError when it was not found."""
        for m in self.modes:
            if m.kind == kind and m.order == order:
                return m
        raise LookupError(f"no {kind} mode of order {order} among the {len(self.modes)} "
                          f"modes solved on level {self.level}")

    def to_dict(self) -> dict:
        """Plain data for the disk cache."""
        return {"level": self.level, "counts": list(self.counts),
                "n_elements": self.n_elements, "n_dof": self.n_dof, "mass_kg": self.mass_kg,
                "seconds": self.seconds,
                "modes": [{"frequency_hz": m.frequency_hz, "kind": m.kind, "order": m.order,
                           "mirror_symmetry": m.mirror_symmetry, "share": m.share,
                           "nodes_m": list(m.nodes_m)} for m in self.modes]}

    @classmethod
    def from_dict(cls, d: dict) -> LevelSolve:
        """Inverse of :meth:`to_dict`."""
        modes = tuple(SolidMode(float(m["frequency_hz"]), str(m["kind"]), int(m["order"]),
                                float(m["mirror_symmetry"]), float(m["share"]),
                                tuple(float(x) for x in m["nodes_m"])) for m in d["modes"])
        nx, ny, nz = (int(c) for c in d["counts"])  # three, or ValueError (a bad cache file)
        return cls(int(d["level"]), (nx, ny, nz), int(d["n_elements"]),
                   int(d["n_dof"]), modes, float(d["mass_kg"]), float(d["seconds"]))


@dataclass(frozen=True)
class SolidPartial:
    """One mode with its error estimate over the mesh levels.

    Attributes
    ----------
    kind, order : str, int
        As :class:`SolidMode`.
    frequency_hz : float
        On the finest level, Hz.
    extrapolated_hz : float
        Richardson extrapolation to zero mesh size, Hz.
    error : float
        Grid-convergence index of the finest level: an estimated bound of the relative
        error of ``frequency_hz`` (0.001 = 0.1 %).
    observed_order : float or None
        Order from three levels; None when two levels were solved or the three did not
        converge monotonically (the theoretical order was used).
    nodes_m : tuple of float
        Vertical modes: nodes on the top face's centre line (finest level), m.
    """

    kind: str
    order: int
    frequency_hz: float
    extrapolated_hz: float
    error: float
    observed_order: float | None
    nodes_m: tuple[float, ...] = ()

    @property
    def error_cents(self) -> float:
        """The error estimate in cents."""
        return 1200.0 * math.log2(1.0 + self.error)


@dataclass(frozen=True)
class SolidResult:
    """A bar solved on two or more mesh levels.

    Attributes
    ----------
    levels : tuple of LevelSolve
        Coarsest first; the last is the finest.
    partials : tuple of SolidPartial
        Modes found on the two finest levels, by frequency.
    """

    levels: tuple[LevelSolve, ...]
    partials: tuple[SolidPartial, ...]

    @property
    def finest(self) -> LevelSolve:
        """The finest level solved."""
        return self.levels[-1]

    def partial(self, kind: str, order: int) -> SolidPartial:
        """Return one mode; LookupError when it was not found on the two finest levels."""
        for p in self.partials:
            if p.kind == kind and p.order == order:
                return p
        raise LookupError(f"no {kind} mode of order {order} on the two finest mesh levels "
                          f"({self.levels[-2].level} and {self.finest.level}); ask for more "
                          "modes")

    def frequency_hz(self, kind: str, order: int) -> float:
        """Frequency of one mode on the finest level, Hz."""
        return self.partial(kind, order).frequency_hz


# ---------------------------------------------------------------------------------------
# Mesh
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Layout:
    """Depth layout: a core band from the top face down to c(x), step bands below it."""

    x_edges: np.ndarray  # segment boundaries, 0 .. L
    steps_d: np.ndarray  # per segment: depth added below the core, m
    levels: np.ndarray  # 0 = lv[0] < lv[1] < ...: distinct values of steps_d


def _profile(geometry: BarGeometry) -> Callable[[np.ndarray], np.ndarray]:
    return lambda x: np.asarray(geometry.thickness_at(np.asarray(x, dtype=float)), float)


def _layout(geometry: BarGeometry) -> _Layout:
    length = geometry.length_m
    edges = np.array([0.0, *geometry.breakpoints(), length])
    delta = 1e-9 * length
    h0 = geometry.thickness_m
    h = _profile(geometry)
    bps = edges[1:-1]
    jumps = h(bps + delta) - h(bps - delta)
    jumps = np.where(np.abs(jumps) > 1e-7 * h0, jumps, 0.0)  # a jump is a step
    cumulative = np.concatenate([[0.0], np.cumsum(jumps)])
    steps_d = cumulative - cumulative.min()
    levels = np.unique(np.round(steps_d / h0, 12)) * h0
    steps_d = levels[np.searchsorted(levels, steps_d - 1e-12 * h0)]
    return _Layout(edges, steps_d, levels)


def _core_depth(geometry: BarGeometry, layout: _Layout, x: np.ndarray) -> np.ndarray:
    """Continuous core depth c(x) = h(x) - (step depth of the segment)."""
    delta = 1e-9 * geometry.length_m
    edges = layout.x_edges
    n_seg = len(edges) - 1
    h = _profile(geometry)

    def side(xs: np.ndarray) -> np.ndarray:
        xs = np.clip(xs, 0.0, geometry.length_m)
        seg = np.clip(np.searchsorted(edges, xs, side="right") - 1, 0, n_seg - 1)
        return h(xs) - layout.steps_d[seg]

    x = np.asarray(x, dtype=float)
    return 0.5 * (side(x - delta) + side(x + delta))


def _x_nodes(geometry: BarGeometry, layout: _Layout, nx: int) -> np.ndarray:
    """Element edges along x: on every breakpoint, uniform inside each segment."""
    edges = layout.x_edges
    pieces = []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        n = max(1, int(round(nx * (b - a) / geometry.length_m)))
        pieces.append(np.linspace(a, b, n + 1)[:-1])
    return np.concatenate([*pieces, [edges[-1]]])


def _build_mesh(geometry: BarGeometry, counts: tuple[int, int, int]):
    """Quadratic hexahedral mesh of the half y <= b/2 and its nodes' reference coordinates.

    Returns ``(MeshHex2, ref)``: ``ref`` holds (x, y, s) per node, s = 1 on the top face,
    0 at the core depth, negative in the step bands.
    """
    from skfem import MeshHex, MeshHex2

    nx, ny, nz = counts
    layout = _layout(geometry)
    h0 = geometry.thickness_m
    x_grid = _x_nodes(geometry, layout, nx)
    y_grid = np.linspace(0.0, geometry.width_m, ny + 1)[: ny // 2 + 1]
    c_mean = float(np.mean(_core_depth(geometry, layout,
                                       np.linspace(0, geometry.length_m, 201))))
    if c_mean <= 0:
        raise ModelError("the undercut leaves no metal under the top face")
    s_parts = [np.linspace(0.0, 1.0, nz + 1)]
    for i in range(1, len(layout.levels)):
        thick = layout.levels[i] - layout.levels[i - 1]
        n_i = max(1, int(math.ceil(nz * thick / c_mean - 1e-9)))
        s_parts.append(np.linspace(-float(i), -float(i - 1), n_i + 1)[:-1])
    s_grid = np.unique(np.concatenate(s_parts))

    base = MeshHex.init_tensor(x_grid, y_grid, s_grid)
    if len(layout.levels) > 1:
        centres = base.p[:, base.t].mean(axis=1)
        seg = np.clip(np.searchsorted(layout.x_edges, centres[0], side="right") - 1, 0,
                      len(layout.x_edges) - 2)
        band = np.where(centres[2] > 0, 0, np.ceil(-centres[2]).astype(int))
        drop = np.nonzero(layout.steps_d[seg] < layout.levels[band] - 1e-12 * h0)[0]
        if len(drop):
            base = base.remove_elements(drop)
    quad = MeshHex2.from_mesh(base)
    ref = np.array(quad.doflocs, copy=True)
    x, s = ref[0], ref[2]
    c = _core_depth(geometry, layout, x)
    if np.any(c <= 0):
        raise ModelError("this combination of steps and slopes in the undercut leaves a core "
                         "of zero thickness; the layered 3-D mesh cannot represent it")
    depth = np.where(s >= 0, (1.0 - s) * c, 0.0)
    if len(layout.levels) > 1:
        band = np.clip(np.ceil(-s - 1e-12).astype(int), 1, len(layout.levels) - 1)
        frac = -(band - 1) - s  # 0 at the top of the band, 1 at its bottom
        lv = layout.levels
        depth = np.where(s >= 0, depth, c + lv[band - 1] + frac * (lv[band] - lv[band - 1]))
    mapped = np.vstack([ref[0], ref[1], h0 - depth])
    return MeshHex2(mapped, quad.t), ref, base.t.shape[1]


# ---------------------------------------------------------------------------------------
# Assembly
# ---------------------------------------------------------------------------------------


_INTORDER = 7
"""Polynomial degree integrated exactly per direction (4 x 4 x 4 Gauss points): exact for
box-shaped elements, with margin for the rational integrands of mapped ones."""


def _assemble(mesh2, material: Material):
    """Assemble stiffness, mass, lumped node masses and node positions.

    Unknowns are blocked by component, u = [u_x; u_y; u_z].
    With ``S_ij = integral d_i phi_a d_j phi_b`` the isotropic stiffness is [1]_ ch. 6

        K_ij = lam S_ij + mu S_ji + mu delta_ij (S_xx + S_yy + S_zz)

    and ``M = diag(Ms, Ms, Ms)``, ``Ms = integral rho phi_a phi_b``.
    """
    from skfem import ElementHex2
    from skfem.assembly import Dofs
    from skfem.quadrature import get_quadrature

    elem = ElementHex2()
    mapping = mesh2.mapping()
    dofs = Dofs(mesh2, elem)
    element_dofs = dofs.element_dofs  # (nb, ne)
    nb, ne = element_dofs.shape
    n = dofs.N
    X, W = get_quadrature(mesh2.refdom, _INTORDER)
    inv_df = mapping.invDF(X)  # (3, 3, ne, nq)
    dx = np.abs(mapping.detDF(X)) * W[None, :]  # (ne, nq)
    phi = np.empty((nb, X.shape[1]))
    dphi = np.empty((nb, 3, X.shape[1]))
    for a in range(nb):
        phi[a], dphi[a] = elem.lbasis(X, a)
    inv_t = np.ascontiguousarray(inv_df.transpose(2, 3, 1, 0))  # (ne, nq, k, i)
    grads = np.matmul(inv_t, np.ascontiguousarray(dphi.transpose(2, 1, 0)))  # (ne, nq, k, nb)
    g = [np.ascontiguousarray(grads[:, :, k, :]) for k in range(3)]
    gw = [np.ascontiguousarray((gk * dx[:, :, None]).transpose(0, 2, 1)) for gk in g]
    rows = np.broadcast_to(element_dofs.T[:, :, None], (ne, nb, nb)).ravel()
    cols = np.broadcast_to(element_dofs.T[:, None, :], (ne, nb, nb)).ravel()

    def scalar(local: np.ndarray) -> sp.csc_matrix:
        return sp.coo_matrix((local.ravel(), (rows, cols)), shape=(n, n)).tocsc()

    S = {(i, j): scalar(np.matmul(gw[i], g[j])) for i in range(3) for j in range(i, 3)}
    E, nu = material.youngs_modulus_pa, material.poisson_ratio
    lam = E * nu / ((1 + nu) * (1 - 2 * nu))
    mu = E / (2 * (1 + nu))
    lap = S[0, 0] + S[1, 1] + S[2, 2]
    blocks: list[list[Any]] = [[None] * 3 for _ in range(3)]
    for i in range(3):
        blocks[i][i] = (lam + mu) * S[i, i] + mu * lap
        for j in range(i + 1, 3):
            blocks[i][j] = lam * S[i, j] + mu * S[i, j].T
            blocks[j][i] = blocks[i][j].T
    K = sp.bmat(blocks, format="csc")
    K = 0.5 * (K + K.T)
    Ms = scalar(material.density_kg_m3 * np.einsum("aq,bq,eq->eab", phi, phi, dx,
                                                   optimize=True))
    Ms = 0.5 * (Ms + Ms.T)
    M = sp.block_diag([Ms, Ms, Ms], format="csc")
    locs = mapping.F(elem.doflocs.T)  # (3, ne, nb)
    xyz = np.empty((3, n))
    xyz[:, element_dofs.T.ravel()] = locs.reshape(3, -1)
    return K, M, np.asarray(Ms.sum(axis=1)).ravel(), xyz


# ---------------------------------------------------------------------------------------
# Mode analysis
# ---------------------------------------------------------------------------------------


class _SolidSections:
    """Section measures on the node lattice of a half-width mesh."""

    def __init__(self, geometry: BarGeometry, ref: np.ndarray, xyz: np.ndarray,
                 w: np.ndarray):
        self.xyz, self.w = xyz, w
        _, ix = np.unique(np.round(ref[0] / geometry.length_m, 9), return_inverse=True)
        self.slice = ix.ravel()
        self.n_slices = int(self.slice.max()) + 1
        s, n = self.slice, self.n_slices
        self.w_slice = np.bincount(s, w, n)
        # the section centroid lies on the mid-width plane, also for a half mesh
        zc = np.bincount(s, w * xyz[2], n) / self.w_slice
        self.dy = xyz[1] - geometry.width_m / 2
        self.dz = xyz[2] - zc[s]
        self.iyy = np.bincount(s, w * self.dy**2, n)
        self.izz = np.bincount(s, w * self.dz**2, n)
        self.polar = self.iyy + self.izz
        tol = 1e-9 * geometry.length_m
        line = np.nonzero((np.abs(self.dy) < tol)
                          & (np.abs(xyz[2] - geometry.thickness_m) < tol))[0]
        self.line = line[np.argsort(xyz[0, line])]

    def shares(self, u: np.ndarray, symmetric: bool) -> dict[str, float]:
        """Kinetic-energy shares of the section motions of a nodal field u (3, n).

        A half mesh holds one family: the shares of the other vanish by symmetry, and
        each sum over the whole section is twice that over the half, so ratios hold.
        """
        w, s, n, ws = self.w, self.slice, self.n_slices, self.w_slice
        total = float(np.sum(w * u * u))
        mean = [np.bincount(s, w * u[k], n) / ws for k in range(3)]
        theta = np.bincount(s, w * (u[2] * self.dy - u[1] * self.dz), n) / self.polar
        # bending turns the section: about z in lateral bending (u_x = -psi_z dy), about
        # y in vertical bending (u_x = psi_y dz); that motion belongs to the bending kind
        psi_z = np.bincount(s, w * u[0] * self.dy, n) / self.iyy
        psi_y = np.bincount(s, w * u[0] * self.dz, n) / self.izz
        out = {"longitudinal": float(np.sum(ws * mean[0] ** 2)) / total,
               "lateral": float(np.sum(ws * mean[1] ** 2 + self.iyy * psi_z**2)) / total,
               "vertical": float(np.sum(ws * mean[2] ** 2 + self.izz * psi_y**2)) / total,
               "torsional": float(np.sum(self.polar * theta**2)) / total}
        for k in (("lateral", "torsional") if symmetric else ("vertical", "longitudinal")):
            out[k] = 0.0
        return out

    def zero_crossings(self, uz: np.ndarray) -> tuple[float, ...]:
        """Zero crossings of the quadratic interpolant of u_z along the top centre line."""
        x = self.xyz[0, self.line]
        v = uz[self.line]
        vmax = float(np.max(np.abs(v)))
        found: list[float] = []
        for k in range(0, len(x) - 2, 2):
            x0, x1, x2 = x[k: k + 3]
            v0, v1, v2 = v[k: k + 3]
            tm = (x1 - x0) / (x2 - x0)
            p = ((v1 - v0) - (v2 - v0) * tm) / (tm * tm - tm)
            q = (v2 - v0) - p
            roots = np.roots([p, q, v0]) if abs(p) > 1e-14 * vmax else np.roots([q, v0])
            for r in np.atleast_1d(roots):
                if abs(r.imag) < 1e-12 and -1e-12 <= r.real < 1.0 - 1e-12:
                    found.append(float(x0 + r.real * (x2 - x0)))
        return tuple(sorted(found))


def classify(symmetric: bool, shares: dict[str, float]) -> tuple[str, float]:
    """Kind of a mode from its mirror symmetry and section-motion shares.

    Returns the kind and the share that named it; ``other`` when the largest share is
    under one half or belongs to the other symmetry family.
    """
    kind = max(shares, key=shares.__getitem__)
    if shares[kind] < 0.5 or (kind in ("vertical", "longitudinal")) != symmetric:
        return "other", shares[kind]
    return kind, shares[kind]


# ---------------------------------------------------------------------------------------
# Solve
# ---------------------------------------------------------------------------------------


def _omega_scale(geometry: BarGeometry, material: Material) -> float:
    """Euler-Bernoulli free-free mode-1 angular frequency at the mean thickness, rad/s.

    A scale for the spectral shift only (Blevins 1979, table 8-1).
    """
    x = np.linspace(0.0, geometry.length_m, 101)
    h = float(np.mean(geometry.thickness_at(x)))
    c = math.sqrt(material.youngs_modulus_pa / (12.0 * material.density_kg_m3))
    return 4.730041**2 / geometry.length_m**2 * h * c


def _lowest(K, M, n_rigid: int, n_elastic: int, om_scale: float):
    """Lowest elastic eigenpairs of (K, M) by shift-invert about a small negative shift."""
    from threadpoolctl import threadpool_limits

    sigma = -0.01 * om_scale**2
    k = min(n_rigid + n_elastic, K.shape[0] - 2)
    v0 = np.random.default_rng(7).standard_normal(K.shape[0])
    with threadpool_limits(limits=1):
        lu = sla.splu((K - sigma * M).tocsc(), permc_spec="MMD_AT_PLUS_A",
                      diag_pivot_thresh=0.0, options={"SymmetricMode": True})
        op = sla.LinearOperator(K.shape, matvec=lu.solve, dtype=float)
        lam, vec = sla.eigsh(K, k=k, M=M, sigma=sigma, which="LM", v0=v0, OPinv=op,
                             tol=1e-10)
    order = np.argsort(lam)
    lam, vec = lam[order], vec[:, order]
    ratio = float(np.max(np.abs(lam[:n_rigid])) / lam[n_rigid])
    if ratio > 1e-6:
        raise ModelError(f"3-D model: rigid-body modes not separated (|lambda_rigid| / "
                         f"lambda_1 = {ratio:.3g}); is the undercut cut through?")
    return lam[n_rigid:], vec[:, n_rigid:]


def solve_level(geometry: BarGeometry, material: Material, level: int, *,
                n_modes: int = 8) -> LevelSolve:
    """Elastic modes of a free bar on one mesh level.

    Parameters
    ----------
    geometry : BarGeometry
        Blank and undercut.
    material : Material
        Isotropic: Young's modulus, Poisson's ratio and density are used.
    level : int
        Mesh level (:func:`mesh_counts`).
    n_modes : int
        Modes solved in each symmetry family (symmetric: vertical, longitudinal;
        antisymmetric: lateral, torsional), 1 to 30.

    Returns
    -------
    LevelSolve
    """
    if not 1 <= n_modes <= 30:
        raise ModelError(f"n_modes = {n_modes}: must be 1 to 30")
    t0 = time.perf_counter()
    counts = mesh_counts(geometry, level)
    mesh2, ref, n_half = _build_mesh(geometry, counts)
    K, M, lumped, xyz = _assemble(mesh2, material)
    n = xyz.shape[1]
    sections = _SolidSections(geometry, ref, xyz, lumped)
    on_plane = np.nonzero(np.abs(xyz[1] - geometry.width_m / 2) < 1e-9 * geometry.length_m)[0]
    om_scale = _omega_scale(geometry, material)
    found = []
    n_dof = 0
    # symmetric family: u_y = 0 on the plane (rigid: x, z translation, y rotation);
    # antisymmetric: u_x = u_z = 0 there (rigid: y translation, x and z rotation)
    for symmetric, fixed_components in ((True, (1,)), (False, (0, 2))):
        fixed = np.zeros(3 * n, dtype=bool)
        for c in fixed_components:
            fixed[c * n + on_plane] = True
        free = np.nonzero(~fixed)[0]
        lam, vec = _lowest(K[free][:, free], M[free][:, free], 3, n_modes, om_scale)
        n_dof += len(free)
        for k in range(len(lam)):
            u = np.zeros(3 * n)
            u[free] = vec[:, k]
            found.append((float(lam[k]), u.reshape(3, n), symmetric))
    found.sort(key=lambda item: item[0])
    counts_by_kind = dict.fromkeys(KINDS, 0)
    modes = []
    for lam, u, symmetric in found:
        kind, share = classify(symmetric, sections.shares(u, symmetric))
        counts_by_kind[kind] += 1
        nodes = sections.zero_crossings(u[2]) if kind == "vertical" else ()
        modes.append(SolidMode(math.sqrt(max(lam, 0.0)) / (2 * math.pi), kind,
                               counts_by_kind[kind], 1.0 if symmetric else 0.0, share, nodes))
    return LevelSolve(level, counts, 2 * n_half, n_dof, tuple(modes),
                      2.0 * float(lumped.sum()), time.perf_counter() - t0)


# ---------------------------------------------------------------------------------------
# Error estimate
# ---------------------------------------------------------------------------------------


def grid_convergence(values: tuple[float, ...], sizes: tuple[float, ...], *,
                     order: float = THEORETICAL_ORDER) -> tuple[float, float, float | None]:
    """Richardson extrapolation and grid-convergence index of the finest of 2-3 solutions.

    Parameters
    ----------
    values : tuple of float
        The quantity on each mesh, coarsest first (2 or 3 values).
    sizes : tuple of float
        Representative mesh size of each, coarsest first, decreasing.
    order : float
        Theoretical order, used with two meshes or when three do not converge
        monotonically.

    Returns
    -------
    (extrapolated, gci, observed) : float, float, float or None
        Extrapolated value, the relative error bound of the finest value (Roache 1994,
        eq. for GCI_fine; Celik et al. 2008, eqs. 3-6) and the observed order (None when
        the theoretical one was used).
    """
    if len(values) not in (2, 3) or len(sizes) != len(values):
        raise ModelError("grid_convergence needs two or three solutions with their sizes")
    f1, f2 = values[-1], values[-2]
    r21 = sizes[-2] / sizes[-1]
    p, safety, observed = order, SAFETY_TWO_LEVELS, None
    if len(values) == 3:
        f3 = values[0]
        r32 = sizes[0] / sizes[1]
        e21, e32 = f2 - f1, f3 - f2
        if e21 != 0 and e32 != 0 and e32 / e21 > 0:
            s = 1.0
            q_p = 0.0
            p_obs = order
            for _ in range(50):  # fixed point of Celik et al. eq. 3
                p_new = abs(math.log(abs(e32 / e21)) + q_p) / math.log(r21)
                p_new = min(max(p_new, 0.5), 12.0)
                q_p = math.log((r21**p_new - s) / (r32**p_new - s))
                if abs(p_new - p_obs) < 1e-10:
                    break
                p_obs = p_new
            observed = p_obs
            # an observed order above the theoretical one is not trusted (Roache 1994)
            p, safety = min(p_obs, order), SAFETY_THREE_LEVELS
        elif e21 == 0:
            return f1, 0.0, None
    rp = r21**p
    extrapolated = (rp * f1 - f2) / (rp - 1.0)
    gci = safety * abs((f1 - f2) / f1) / (rp - 1.0)
    return extrapolated, gci, observed


def combine(levels: tuple[LevelSolve, ...]) -> SolidResult:
    """Match the modes of 2-3 levels by kind and order and estimate each one's error."""
    levels = tuple(sorted(levels, key=lambda lv: lv.n_elements))
    if len(levels) < 2:
        raise ModelError("an error estimate needs at least two mesh levels")
    use = levels[-3:]
    sizes = tuple(lv.n_elements ** (-1.0 / 3.0) for lv in use)
    partials = []
    for m in use[-1].modes:
        if m.kind == "other":
            continue
        vals: list[float | None] = []
        for lv in use:
            try:
                vals.append(lv.mode(m.kind, m.order).frequency_hz)
            except LookupError:
                vals.append(None)
        keep = [(v, s) for v, s in zip(vals, sizes, strict=True) if v is not None]
        if len(keep) < 2 or vals[-2] is None:
            continue
        keep = keep[-3:]
        ext, gci, obs = grid_convergence(tuple(v for v, _ in keep), tuple(s for _, s in keep))
        partials.append(SolidPartial(m.kind, m.order, m.frequency_hz, ext, gci, obs,
                                     m.nodes_m))
    return SolidResult(levels, tuple(partials))


WATCHED: tuple[tuple[str, int], ...] = (("vertical", 1), ("vertical", 2), ("vertical", 3),
                                        ("lateral", 1), ("torsional", 1), ("torsional", 2))
"""Modes whose error estimate decides when refinement stops (the tuned partials and the
lateral and torsional modes nearest them)."""


MAX_UNKNOWNS = 100_000
"""Largest eigenproblem solved (unknowns of one symmetry family): the sparse LU of the
demo's A4 at level 6, 61,000 unknowns, peaked at 1.4 GB; fill-in grows faster than
the unknowns, so this bound keeps a solve within a few GB."""


def unknowns(geometry: BarGeometry, level: int) -> int:
    """Return about how many unknowns one symmetry family of a level has."""
    nx, ny, nz = mesh_counts(geometry, level)
    return 3 * (2 * nx + 1) * (ny + 1) * (2 * nz + 1)


def finest_level(geometry: BarGeometry) -> int:
    """Return the finest mesh level this bar may be solved on (:data:`MAX_UNKNOWNS`)."""
    return max([lv for lv in range(MIN_LEVEL, MAX_LEVEL + 1)
                if unknowns(geometry, lv) <= MAX_UNKNOWNS], default=MIN_LEVEL)


def _watched_error(result: SolidResult, watched) -> float:
    errs = []
    for kind, order in watched:
        try:
            errs.append(result.partial(kind, order).error)
        except LookupError:
            continue
    return max(errs, default=math.inf)


def solve_levels(geometry: BarGeometry, material: Material, *, level: int | None = None,
                 accuracy: float | None = None, n_modes: int = 8,
                 watched: tuple[tuple[str, int], ...] = WATCHED,
                 solver: Callable[[BarGeometry, Material, int, int], LevelSolve] | None = None,
                 progress: Callable[[LevelSolve], None] | None = None) -> SolidResult:
    """Solve a bar on successive mesh levels with an error estimate.

    Parameters
    ----------
    geometry, material
        As :func:`solve_level`.
    level : int, optional
        Finest level to solve; the two levels below it (one below for level 2) give the
        error estimate. Exclusive with ``accuracy``.
    accuracy : float, optional
        Wanted relative error of the watched modes (0.0005 = 0.05 %): levels 1, 2, 3, ...
        are solved until the estimate is below it (at most :data:`MAX_LEVEL`, and no
        level over :data:`MAX_UNKNOWNS`). Default when neither is given: 0.0005.
    n_modes : int
        Modes per symmetry family.
    watched : tuple of (kind, order)
        The modes whose estimate ``accuracy`` applies to.
    solver : callable, optional
        ``solver(geometry, material, level, n_modes) -> LevelSolve`` in place of
        :func:`solve_level` (a cached solve).
    progress : callable, optional
        Called with each finished level.

    Returns
    -------
    SolidResult
        With ``accuracy``: the result of the last level solved, which meets it unless
        :data:`MAX_LEVEL` was reached (check :func:`watched_error`).
    """
    if level is not None and accuracy is not None:
        raise ModelError("give a mesh level or an accuracy, not both")
    run = solver or (lambda g, m, lv, n: solve_level(g, m, lv, n_modes=n))
    done: list[LevelSolve] = []

    def one(lv: int) -> None:
        done.append(run(geometry, material, lv, n_modes))
        if progress is not None:
            progress(done[-1])

    if level is not None:
        if not MIN_LEVEL + 1 <= level <= MAX_LEVEL:
            raise ModelError(f"mesh level {level}: must be {MIN_LEVEL + 1} to {MAX_LEVEL}")
        if unknowns(geometry, level) > MAX_UNKNOWNS:
            raise ModelError(f"mesh level {level} would need about "
                             f"{unknowns(geometry, level):,} unknowns for this bar; at most "
                             f"{MAX_UNKNOWNS:,} are solved (a few GB of memory)")
        for lv in range(max(MIN_LEVEL, level - 2), level + 1):
            one(lv)
        return combine(tuple(done))
    target = 5e-4 if accuracy is None else accuracy
    if not target > 0:
        raise ModelError(f"accuracy {target}: must be > 0")
    one(MIN_LEVEL)
    one(MIN_LEVEL + 1)
    result = combine(tuple(done))
    while (_watched_error(result, watched) > target and done[-1].level < MAX_LEVEL
           and unknowns(geometry, done[-1].level + 1) <= MAX_UNKNOWNS):
        one(done[-1].level + 1)
        result = combine(tuple(done))
    return result


def watched_error(result: SolidResult, watched: tuple[tuple[str, int], ...] = WATCHED) -> float:
    """Largest error estimate over the watched modes that were found (inf if none)."""
    return _watched_error(result, watched)


# ---------------------------------------------------------------------------------------
# Cache of finished solves
# ---------------------------------------------------------------------------------------


def cache_dir() -> Path:
    """Return the folder of finished 3-D solves.

    ``$BARWRIGHT_CACHE``, else ``$XDG_CACHE_HOME/barwright``, else ``~/.cache/barwright``.
    """
    env = os.environ.get(CACHE_ENV)
    if env:
        return Path(env)
    xdg = os.environ.get("XDG_CACHE_HOME")
    return (Path(xdg) if xdg else Path.home() / ".cache") / "barwright"


def cache_key(geometry: BarGeometry, material: Material, level: int, n_modes: int) -> str:
    """Hash of everything a level solve depends on.

    numpy scalars print as ``np.float64(0.25)`` where a plain float prints ``0.25``:
    they are written as their value, so a tuned bar and the same bar read back from
    a file share a key.
    """
    shape = re.sub(r"np\.\w+\(([^()]*)\)", r"\1", repr(geometry))
    text = json.dumps([MODEL_VERSION, shape, material.youngs_modulus_pa,
                       material.poisson_ratio, material.density_kg_m3, int(level),
                       int(n_modes)])
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:32]


def cached_level(geometry: BarGeometry, material: Material, level: int,
                 n_modes: int = 8) -> LevelSolve:
    """:func:`solve_level`, read from the cache folder when solved before, else stored.

    A cache file that cannot be read is solved again; a folder that cannot be written
    only costs the saving.
    """
    folder = cache_dir() / "solid"
    path = folder / f"{cache_key(geometry, material, level, n_modes)}.json"
    try:
        return LevelSolve.from_dict(json.loads(path.read_text(encoding="utf-8")))
    except (OSError, ValueError, KeyError, TypeError):
        pass
    result = solve_level(geometry, material, level, n_modes=n_modes)
    try:
        folder.mkdir(parents=True, exist_ok=True)
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(json.dumps(result.to_dict()), encoding="utf-8")
        os.replace(tmp, path)
    except OSError:
        pass
    return result


def cached_solver(geometry: BarGeometry, material: Material, level: int,
                  n_modes: int) -> LevelSolve:
    """:func:`cached_level` in the ``solver`` form :func:`solve_levels` takes."""
    return cached_level(geometry, material, level, n_modes)


def solve_bar_3d(geometry: BarGeometry, material: Material, *, level: int | None = None,
                 accuracy: float | None = None, n_modes: int = 8,
                 watched: tuple[tuple[str, int], ...] = WATCHED,
                 cache: bool = True) -> SolidResult:
    """:func:`solve_levels` with the disk cache; a picklable job for the executor."""
    return solve_levels(geometry, material, level=level, accuracy=accuracy, n_modes=n_modes,
                        watched=watched, solver=cached_solver if cache else None)


def beside_one_d(result: SolidResult, geometry: BarGeometry,
                 material: Material) -> list[dict[str, Any]]:
    """Set each 3-D partial beside the 1-D model's (its frequency and the cents between)."""
    from synth.physics.bar_fe import solve_bar

    one_d = solve_bar(geometry, material, n_vertical=5, n_lateral=2, n_torsional=3)
    rows: list[dict[str, Any]] = []
    for p in result.partials:
        try:
            f1 = one_d.mode(p.kind, p.order).frequency_hz
        except (LookupError, ValueError, IndexError):
            f1 = None
        rows.append({
            "kind": p.kind, "order": p.order, "frequency_hz": p.frequency_hz,
            "extrapolated_hz": p.extrapolated_hz, "error": p.error,
            "error_cents": p.error_cents, "observed_order": p.observed_order,
            "one_d_hz": f1,
            "cents_1d_minus_3d": None if f1 is None else 1200 * math.log2(f1 / p.frequency_hz),
            "nodes_m": list(p.nodes_m),
        })
    return rows
