"""Independent 3-D linear-elastic reference model of a free-free bar with an undercut.

This module is test infrastructure, not part of the ``synth`` package. It gives an outside
check for the project's 1-D bar model: a solid finite-element model that makes none of the
beam assumptions (plane sections, a shear coefficient, St Venant torsion without warping
inertia). It depends only on numpy, scipy and scikit-fem.

Geometry
    Bar of length ``L`` along x, width ``b`` along y and thickness profile ``h(x)`` along z
    (the vertical, bending direction). The top face is flat at ``z = h0`` (the blank
    thickness) and the bottom face follows the undercut, ``z = h0 - h(x)``.

Discretisation
    A structured hexahedral mesh of a reference box is mapped onto the bar. Element edges
    along x fall on every breakpoint of the profile (kinks and steps). Elements are 27-node
    triquadratic Lagrange hexahedra (``ElementHex2``) on isoparametric quadratic geometry
    (``MeshHex2``), so a curved undercut is followed to third order in the element length.
    A step in the profile is meshed exactly: the part of the thicker side below the thinner
    side becomes extra element layers, conforming with the rest of the mesh.

Solution
    Isotropic linear elasticity, no supports, generalized eigenproblem ``K u = om^2 M u``
    solved by ``scipy.sparse.linalg.eigsh`` in shift-invert mode about a small negative
    shift; the rigid-body modes come out first and are checked and dropped. The bar is
    symmetric about its mid-width plane, so by default the modes symmetric about it
    (vertical, longitudinal) and those antisymmetric (lateral, torsional) are solved
    separately on half the width; ``use_symmetry=False`` solves the whole width at once.

Stiffness and mass are integrated with scikit-fem's element basis, isoparametric mapping
and Gauss quadrature, and the element matrices are formed by batched matrix products
rather than ``skfem.asm``: the vectorial 27-node element has 81 x 81 local pairs, and
scikit-fem's pair-by-pair Python loop took 20 s for 96 elements with its default
quadrature. A test checks the result against ``skfem.asm(linear_elasticity(...))`` on a
small mesh.

References
----------
.. [1] Zienkiewicz, O. C., Taylor, R. L. and Zhu, J. Z., "The Finite Element Method: Its
   Basis and Fundamentals", 7th ed., Butterworth-Heinemann, 2013, ISBN 978-1-85617-633-0,
   ch. 6 (isoparametric elements), ch. 16 (free vibration of elastic solids).
.. [2] Gustafsson, T. and McBain, G. D., "scikit-fem: A Python package for finite element
   assembly", Journal of Open Source Software 5(52), 2369, 2020, doi:10.21105/joss.02369.
.. [3] Lehoucq, R. B., Sorensen, D. C. and Yang, C., "ARPACK Users' Guide", SIAM, 1998,
   ISBN 978-0-89871-407-4, sec. 3.2 (shift-invert spectral transformation).
"""

from __future__ import annotations

import functools
import hashlib
import math
import os
import pickle
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import scipy
import scipy.sparse as sp
import scipy.sparse.linalg as sla

KINDS: tuple[str, ...] = ("vertical", "lateral", "torsional", "longitudinal", "other")
"""Mode kinds returned by :func:`solve_bar`."""


# ---------------------------------------------------------------------------------------
# Inputs
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Material:
    """Isotropic linear-elastic material.

    Parameters
    ----------
    youngs_modulus_pa : float
        Young's modulus E in Pa, > 0.
    poisson_ratio : float
        Poisson's ratio nu, -1 < nu < 0.5.
    density_kg_m3 : float
        Density rho in kg/m^3, > 0.
    """

    youngs_modulus_pa: float
    poisson_ratio: float
    density_kg_m3: float

    def __post_init__(self) -> None:
        if not self.youngs_modulus_pa > 0:
            raise ValueError(f"youngs_modulus_pa = {self.youngs_modulus_pa}: must be > 0")
        if not -1.0 < self.poisson_ratio < 0.5:
            raise ValueError(f"poisson_ratio = {self.poisson_ratio}: must be in (-1, 0.5)")
        if not self.density_kg_m3 > 0:
            raise ValueError(f"density_kg_m3 = {self.density_kg_m3}: must be > 0")

    @property
    def shear_modulus_pa(self) -> float:
        """Shear modulus G = E / (2 (1 + nu)) in Pa."""
        return self.youngs_modulus_pa / (2.0 * (1.0 + self.poisson_ratio))


ALUMINIUM_6061 = Material(youngs_modulus_pa=68.9e9, poisson_ratio=0.33, density_kg_m3=2700.0)
"""6061 aluminium as used by the design notes' check values (E 68.9 GPa, nu 0.33,
rho 2700 kg/m^3; handbook values quoted from memory in physics.md section 4)."""


@dataclass(frozen=True)
class UniformProfile:
    """Constant thickness ``thickness_m`` (m, > 0)."""

    thickness_m: float

    @property
    def breakpoints_m(self) -> tuple[float, ...]:
        """No kinks or steps."""
        return ()

    def __call__(self, x_m: np.ndarray) -> np.ndarray:
        """Thickness at ``x_m`` (m), m."""
        return np.full_like(np.asarray(x_m, dtype=float), self.thickness_m)


@dataclass(frozen=True)
class ArchProfile:
    """Symmetric power-law arch: ``h = h0 - (h0 - hc) (1 - u^p)`` for ``u < 1``, else ``h0``.

    ``u = |x - L/2| / (L/2 - x1)``. With ``exponent = 4`` this is the quartic arch of the
    design notes (physics.md section 3.4). The profile has kinks at ``x1`` and ``L - x1``.

    Parameters
    ----------
    length_m : float
        Bar length L in m.
    blank_thickness_m : float
        Thickness h0 outside the arch, m.
    centre_thickness_m : float
        Thickness hc at x = L/2, m, 0 < hc <= h0.
    flat_end_m : float
        Length x1 of the uncut part at each end, m, 0 < x1 < L/2.
    exponent : float
        Power p of the arch, > 0 (2 = parabolic, 4 = quartic).
    """

    length_m: float
    blank_thickness_m: float
    centre_thickness_m: float
    flat_end_m: float
    exponent: float = 4.0

    def __post_init__(self) -> None:
        if not 0 < self.centre_thickness_m <= self.blank_thickness_m:
            raise ValueError("centre_thickness_m must be in (0, blank_thickness_m]")
        if not 0 < self.flat_end_m < self.length_m / 2:
            raise ValueError("flat_end_m must be in (0, length_m / 2)")
        if not self.exponent > 0:
            raise ValueError("exponent must be > 0")

    @property
    def breakpoints_m(self) -> tuple[float, ...]:
        """The two kinks where the arch meets the flat ends."""
        return (self.flat_end_m, self.length_m - self.flat_end_m)

    def __call__(self, x_m: np.ndarray) -> np.ndarray:
        """Thickness at ``x_m`` (m), m."""
        x = np.asarray(x_m, dtype=float)
        half = self.length_m / 2
        u = np.abs(x - half) / (half - self.flat_end_m)
        depth = (self.blank_thickness_m - self.centre_thickness_m) * (
            1.0 - np.minimum(u, 1.0) ** self.exponent
        )
        return self.blank_thickness_m - depth


@dataclass(frozen=True)
class SteppedProfile:
    """Piecewise-constant thickness, as left by flat cuts of a milling cutter.

    Parameters
    ----------
    edges_m : tuple of float
        Interior step positions in m, strictly increasing, inside (0, L).
    thicknesses_m : tuple of float
        One thickness per piece (``len(edges_m) + 1`` values), m, > 0.
    """

    edges_m: tuple[float, ...]
    thicknesses_m: tuple[float, ...]

    def __post_init__(self) -> None:
        if len(self.thicknesses_m) != len(self.edges_m) + 1:
            raise ValueError("thicknesses_m needs len(edges_m) + 1 values")
        if any(h <= 0 for h in self.thicknesses_m):
            raise ValueError("every thickness must be > 0")
        if any(b <= a for a, b in zip(self.edges_m, self.edges_m[1:], strict=False)):
            raise ValueError("edges_m must be strictly increasing")

    @property
    def breakpoints_m(self) -> tuple[float, ...]:
        """The step positions."""
        return tuple(self.edges_m)

    def __call__(self, x_m: np.ndarray) -> np.ndarray:
        """Thickness at ``x_m`` (m), m; at a step the piece to the right applies."""
        x = np.asarray(x_m, dtype=float)
        piece = np.searchsorted(np.asarray(self.edges_m), x, side="right")
        return np.asarray(self.thicknesses_m)[piece]


@dataclass(frozen=True)
class BarGeometry:
    """Free-free bar: length, width, blank thickness and thickness profile.

    Parameters
    ----------
    length_m : float
        Length L along x, m, > 0.
    width_m : float
        Width b along y, m, > 0.
    blank_thickness_m : float
        Height h0 of the flat top face above z = 0, m, > 0.
    profile : callable
        Vectorised ``h(x_m) -> thickness_m`` (m, > 0 on [0, L]). Must be hashable for the
        result cache; the profile classes of this module compare by value, any other
        callable by identity.
    breakpoints_m : tuple of float or None
        Positions of kinks and steps in (0, L). ``None`` takes ``profile.breakpoints_m``
        when the profile has it, else none.
    """

    length_m: float
    width_m: float
    blank_thickness_m: float
    profile: Callable[[np.ndarray], np.ndarray]
    breakpoints_m: tuple[float, ...] | None = None

    def __post_init__(self) -> None:
        for name in ("length_m", "width_m", "blank_thickness_m"):
            if not getattr(self, name) > 0:
                raise ValueError(f"{name} = {getattr(self, name)}: must be > 0")
        if self.breakpoints_m is None:
            object.__setattr__(
                self, "breakpoints_m", tuple(getattr(self.profile, "breakpoints_m", ()))
            )
        bps = tuple(float(x) for x in self.breakpoints_m)
        if any(not 0 < x < self.length_m for x in bps):
            raise ValueError(f"breakpoints_m = {bps}: each must lie inside (0, length_m)")
        object.__setattr__(self, "breakpoints_m", tuple(sorted(set(bps))))

    @classmethod
    def uniform(cls, length_m: float, width_m: float, thickness_m: float) -> BarGeometry:
        """Rectangular bar of constant thickness."""
        return cls(length_m, width_m, thickness_m, UniformProfile(thickness_m))


@dataclass(frozen=True)
class MeshSize:
    """Element counts of the hexahedral mesh.

    Parameters
    ----------
    nx : int
        Elements along the length, about: each segment between breakpoints gets a share
        in proportion to its length, at least one.
    ny : int
        Elements across the whole width, even (the mesh then has a mid-width plane).
    nz : int
        Elements through the thickness (more where a stepped profile adds layers).
    grading : float
        0 for uniform spacing in y and z; up to < 1 packs nodes towards the faces.
    """

    nx: int = 24
    ny: int = 4
    nz: int = 2
    grading: float = 0.0

    def __post_init__(self) -> None:
        if self.nx < 1 or self.ny < 2 or self.nz < 1 or self.ny % 2:
            raise ValueError(f"{self}: need nx >= 1, nz >= 1 and ny >= 2 even")
        if not 0.0 <= self.grading < 1.0:
            raise ValueError(f"{self}: grading must be in [0, 1)")

    def refined(self) -> MeshSize:
        """Twice as many elements in every direction."""
        return MeshSize(2 * self.nx, 2 * self.ny, 2 * self.nz)


COARSE_MESH = MeshSize(nx=36, ny=8, nz=3)
"""Coarser mesh of the default convergence pair, sized for bars of L/h0 about 10-20 and
b/h of 2-6 (the design notes' 0.3 x 0.05 x 0.02 m bars); longer, thinner bars need a
larger ``nx`` (about 1 element per thickness h0 keeps partial 3 within 0.02%)."""

FINE_MESH = MeshSize(nx=48, ny=12, nz=4)
"""Finer mesh of the default convergence pair; its results are the reference values."""


# ---------------------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Mode:
    """One elastic mode of the 3-D model.

    Attributes
    ----------
    index : int
        Position among the elastic modes by frequency, 1-based.
    frequency_hz : float
        Natural frequency, Hz.
    kind : str
        One of :data:`KINDS`.
    order : int
        Position among the modes of the same kind, 1-based (vertical order 1 is partial 1).
    mirror_symmetry : float
        Share of kinetic energy in the part symmetric about the mid-width plane y = b/2
        (1 symmetric, 0 antisymmetric).
    shares : dict
        Kinetic-energy shares of the section motions used for the classification:
        ``"vertical"`` (section translation in z), ``"lateral"`` (in y), ``"torsional"``
        (section rotation about x), ``"longitudinal"`` (section-mean axial motion).
    node_positions_m : tuple of float
        Vertical modes only: x of the zero crossings of u_z along the top centre line
        (y = b/2, z = h0), m, increasing. Empty for other kinds.
    centreline_x_m, centreline_uz : tuple of float
        Vertical modes only: u_z sampled at the mesh nodes of the top centre line, scaled
        so that (1/L) integral u_z^2 dx = 1 and u_z(0) > 0 (the normalisation of
        physics.md section 1, where |phi_n(0)| = 2 for a uniform bar). Consecutive
        triples (0-1-2, 2-3-4, ...) are the three nodes of one element edge; use
        :meth:`shape_at` for values in between. Empty for other kinds.
    """

    index: int
    frequency_hz: float
    kind: str
    order: int
    mirror_symmetry: float
    shares: dict = field(compare=False, hash=False)
    node_positions_m: tuple[float, ...] = ()
    centreline_x_m: tuple[float, ...] = field(default=(), repr=False)
    centreline_uz: tuple[float, ...] = field(default=(), repr=False)

    def shape_at(self, x_m: float | np.ndarray) -> np.ndarray:
        """Normalised u_z on the top centre line at ``x_m`` (m, in [0, L]).

        Interpolates with the element's own quadratic along the line, so the value is
        the finite-element field itself.
        """
        if not self.centreline_x_m:
            raise LookupError(f"{self.kind} mode {self.order}: no centre-line shape kept")
        xs = np.asarray(self.centreline_x_m)
        vs = np.asarray(self.centreline_uz)
        x = np.atleast_1d(np.asarray(x_m, dtype=float))
        if np.any(x < xs[0] - 1e-12) or np.any(x > xs[-1] + 1e-12):
            raise ValueError(f"x_m must lie in [{xs[0]}, {xs[-1]}]")
        ends = xs[0::2]
        k = 2 * np.clip(np.searchsorted(ends, x, side="right") - 1, 0, len(ends) - 2)
        x0, x1, x2 = xs[k], xs[k + 1], xs[k + 2]
        v0, v1, v2 = vs[k], vs[k + 1], vs[k + 2]
        # Lagrange quadratic through the three nodes of the edge
        out = (
            v0 * (x - x1) * (x - x2) / ((x0 - x1) * (x0 - x2))
            + v1 * (x - x0) * (x - x2) / ((x1 - x0) * (x1 - x2))
            + v2 * (x - x0) * (x - x1) / ((x2 - x0) * (x2 - x1))
        )
        return out if np.ndim(x_m) else out[0]


@dataclass(frozen=True)
class BarModes:
    """Elastic modes of one solve, lowest first.

    Attributes
    ----------
    geometry, material, mesh
        The inputs.
    modes : tuple of Mode
        Elastic modes by increasing frequency (rigid-body modes removed).
    n_dof : int
        Number of unknowns.
    mass_kg : float
        Mass integrated over the mesh, kg.
    rigid_body_ratio : float
        Largest |eigenvalue| of the six rigid-body modes over the lowest elastic eigenvalue.
    solve_time_s : float
        Wall time of mesh, assembly and eigensolution, s (not compared).
    """

    geometry: BarGeometry
    material: Material
    mesh: MeshSize
    modes: tuple[Mode, ...]
    n_dof: int
    mass_kg: float
    rigid_body_ratio: float
    solve_time_s: float = field(compare=False)

    def of_kind(self, kind: str) -> tuple[Mode, ...]:
        """Modes of one kind, by increasing frequency."""
        if kind not in KINDS:
            raise ValueError(f"kind = {kind!r}: must be one of {KINDS}")
        return tuple(m for m in self.modes if m.kind == kind)

    def mode(self, kind: str, order: int) -> Mode:
        """Return the ``order``-th mode (1-based) of ``kind``; LookupError if absent."""
        found = self.of_kind(kind)
        if not 1 <= order <= len(found):
            raise LookupError(
                f"no {kind} mode of order {order}: only {len(found)} among the "
                f"{len(self.modes)} modes solved; ask for more modes"
            )
        return found[order - 1]

    def frequency_hz(self, kind: str, order: int) -> float:
        """Frequency of the ``order``-th mode of ``kind``, Hz."""
        return self.mode(kind, order).frequency_hz


@dataclass(frozen=True)
class Convergence:
    """Two solves on a mesh and its refinement.

    ``relative_change(kind, order)`` is ``(f_coarse - f_fine) / f_fine``. When the
    frequency converges monotonically and the fine error is at most half the coarse one,
    ``|change|`` bounds the error of the fine result. The default pair refines every
    direction by 4/3 to 3/2; with the observed rates of these quadratic elements (error
    about h^3.5 for torsion, h^4 for bending) that cuts the error by a factor of 2.7 or
    more, so the change over-estimates the fine error.
    """

    coarse: BarModes
    fine: BarModes

    def relative_change(self, kind: str, order: int) -> float:
        """Relative frequency change from the coarse to the fine mesh."""
        f_fine = self.fine.frequency_hz(kind, order)
        return (self.coarse.frequency_hz(kind, order) - f_fine) / f_fine

    def table(self) -> tuple[tuple[str, int, float, float, float], ...]:
        """Rows (kind, order, f_coarse_hz, f_fine_hz, relative_change).

        One row per mode found on both meshes, in order of the fine frequencies.
        """
        rows = []
        for m in self.fine.modes:
            try:
                fc = self.coarse.frequency_hz(m.kind, m.order)
            except LookupError:
                continue
            change = (fc - m.frequency_hz) / m.frequency_hz
            rows.append((m.kind, m.order, fc, m.frequency_hz, change))
        return tuple(rows)


# ---------------------------------------------------------------------------------------
# Mesh
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Layout:
    """Depth layout of the mesh.

    A core band reaches from the top face down to ``c(x)``; for stepped profiles extra
    bands lie below it (band i spans depths c + lv[i-1] .. c + lv[i]).
    """

    x_edges: np.ndarray  # segment boundaries, 0 .. L
    steps_d: np.ndarray  # per segment: depth added below the core, m
    levels: np.ndarray  # 0 = lv[0] < lv[1] < ... distinct values of steps_d


def _layout(geometry: BarGeometry) -> _Layout:
    length = geometry.length_m
    edges = np.array([0.0, *geometry.breakpoints_m, length])
    delta = 1e-9 * length
    h0 = geometry.blank_thickness_m
    # jump of h at each breakpoint; a jump larger than 1e-7 h0 is a step
    bps = edges[1:-1]
    jumps = np.asarray(geometry.profile(bps + delta), float) - np.asarray(
        geometry.profile(bps - delta), float
    )
    jumps = np.where(np.abs(jumps) > 1e-7 * h0, jumps, 0.0)
    cumulative = np.concatenate([[0.0], np.cumsum(jumps)])
    steps_d = cumulative - cumulative.min()
    levels = np.unique(np.round(steps_d / h0, 12)) * h0
    # snap steps_d to the level values so that band membership tests are exact
    steps_d = levels[np.searchsorted(levels, steps_d - 1e-12 * h0)]
    return _Layout(edges, steps_d, levels)


def _core_depth(geometry: BarGeometry, layout: _Layout, x: np.ndarray) -> np.ndarray:
    """Continuous core depth c(x) = h(x) - (step depth of the segment).

    At a breakpoint the two one-sided values are averaged (they agree there).
    """
    x = np.asarray(x, dtype=float)
    delta = 1e-9 * geometry.length_m
    edges = layout.x_edges
    n_seg = len(edges) - 1

    def side(xs: np.ndarray) -> np.ndarray:
        xs = np.clip(xs, 0.0, geometry.length_m)
        seg = np.clip(np.searchsorted(edges, xs, side="right") - 1, 0, n_seg - 1)
        return np.asarray(geometry.profile(xs), float) - layout.steps_d[seg]

    return 0.5 * (side(x - delta) + side(x + delta))


def _x_nodes(geometry: BarGeometry, layout: _Layout, nx: int) -> np.ndarray:
    """Element edges along x, on every breakpoint and uniform inside each segment.

    About ``nx`` in all. Equal segments get equal counts, so symmetric bars get symmetric
    meshes.
    """
    edges = layout.x_edges
    pieces = []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        n = max(1, int(round(nx * (b - a) / geometry.length_m)))
        pieces.append(np.linspace(a, b, n + 1)[:-1])
    return np.concatenate([*pieces, [edges[-1]]])


def _graded(n: int, grading: float) -> np.ndarray:
    """Return ``n + 1`` points on [0, 1], closer together at both ends.

    Points t - g sin(2 pi t)/(2 pi): spacing (1 - g) at the ends and (1 + g) in the middle
    relative to uniform.
    """
    t = np.linspace(0.0, 1.0, n + 1)
    return t - grading * np.sin(2 * np.pi * t) / (2 * np.pi)


def _build_mesh(geometry: BarGeometry, mesh: MeshSize, half: bool = False):
    """Quadratic hexahedral mesh of the bar and the reference coordinates of its nodes.

    With ``half``, only the side y <= b/2 of the mid-width plane is meshed (``ny / 2``
    elements across it, the same nodes as that side of the whole mesh).

    Returns
    -------
    mesh2 : skfem.MeshHex2
        Mapped mesh.
    ref : ndarray, shape (3, n_nodes)
        Node positions (x, y, s) in the reference box, s = 1 on the top face, s = 0 at the
        core depth, s < 0 in the step bands.
    """
    from skfem import MeshHex, MeshHex2

    layout = _layout(geometry)
    h0 = geometry.blank_thickness_m
    x_grid = _x_nodes(geometry, layout, mesh.nx)
    y_grid = geometry.width_m * _graded(mesh.ny, mesh.grading)
    if half:
        y_grid = y_grid[: mesh.ny // 2 + 1]

    # reference vertical grid: core band [0, 1], step band i in [-i, -(i-1)]
    c_mean = float(np.mean(_core_depth(geometry, layout, np.linspace(0, geometry.length_m, 201))))
    if c_mean <= 0:
        raise ValueError("profile leaves no material under the top face")
    s_grid = [_graded(mesh.nz, mesh.grading)]
    for i in range(1, len(layout.levels)):
        thick = layout.levels[i] - layout.levels[i - 1]
        n_i = max(1, int(math.ceil(mesh.nz * thick / c_mean - 1e-9)))
        s_grid.append(np.linspace(-float(i), -float(i - 1), n_i + 1)[:-1])
    s_grid = np.unique(np.concatenate(s_grid))

    base = MeshHex.init_tensor(x_grid, y_grid, s_grid)
    if len(layout.levels) > 1:
        centres = base.p[:, base.t].mean(axis=1)
        seg = np.clip(
            np.searchsorted(layout.x_edges, centres[0], side="right") - 1,
            0,
            len(layout.x_edges) - 2,
        )
        band = np.where(centres[2] > 0, 0, np.ceil(-centres[2]).astype(int))
        needed = layout.levels[band]
        drop = np.nonzero(layout.steps_d[seg] < needed - 1e-12 * h0)[0]
        if len(drop):
            base = base.remove_elements(drop)
    quad = MeshHex2.from_mesh(base)
    ref = np.array(quad.doflocs, copy=True)

    x, s = ref[0], ref[2]
    c = _core_depth(geometry, layout, x)
    if np.any(c <= 0):
        raise ValueError(
            "this combination of steps and slopes leaves a core of zero thickness; "
            "the layered mesh cannot represent it"
        )
    depth = np.where(s >= 0, (1.0 - s) * c, 0.0)
    if len(layout.levels) > 1:
        band = np.ceil(-s - 1e-12).astype(int)
        band = np.clip(band, 1, len(layout.levels) - 1)
        frac = -(band - 1) - s  # 0 at top of band, 1 at bottom
        lv = layout.levels
        depth_b = c + lv[band - 1] + frac * (lv[band] - lv[band - 1])
        depth = np.where(s >= 0, depth, depth_b)
    mapped = np.vstack([ref[0], ref[1], h0 - depth])
    return MeshHex2(mapped, quad.t), ref


# ---------------------------------------------------------------------------------------
# Assembly
# ---------------------------------------------------------------------------------------


_INTORDER = 7
"""Polynomial degree integrated exactly per direction by the element quadrature (4 x 4 x
4 Gauss points). Degree 4 is exact for the stiffness and mass of box-shaped elements;
the margin covers the rational integrands of mapped ones (on the arch bar, degree 12, the
scikit-fem default for this element, agreed with 7 to 1e-7 in every frequency)."""


def _assemble(mesh2, material: Material):
    """Stiffness and mass matrices, node coordinates and lumped node masses.

    Unknowns are ordered by component: ``u = [u_x; u_y; u_z]``, each over all nodes. With
    ``S_ij = integral d_i phi_a d_j phi_b`` (scalar, over all elements), the stiffness of the
    isotropic solid, u = phi_a e_i and v = phi_b e_j, is [1, ch. 6]

        K_ij = lam S_ij + mu S_ji + mu delta_ij (S_xx + S_yy + S_zz),   S_ji = S_ij^T

    and the mass is ``M = diag(Ms, Ms, Ms)`` with ``Ms = integral rho phi_a phi_b``.

    Returns
    -------
    K, M : scipy.sparse.csc_matrix, shape (3 N, 3 N)
    Ms : scipy.sparse.csc_matrix, shape (N, N)
        Scalar mass matrix, kg.
    xyz : ndarray, shape (3, N)
        Node positions, m.
    """
    from skfem import ElementHex2
    from skfem.assembly import Dofs
    from skfem.quadrature import get_quadrature

    elem = ElementHex2()
    mapping = mesh2.mapping()  # isoparametric, quadratic geometry
    dofs = Dofs(mesh2, elem)
    element_dofs = dofs.element_dofs  # (nb, ne)
    nb, ne = element_dofs.shape
    n = dofs.N
    # tensor Gauss rule, _INTORDER = polynomial degree integrated exactly per direction
    X, W = get_quadrature(mesh2.refdom, _INTORDER)
    inv_df = mapping.invDF(X)  # (3, 3, ne, nq)
    dx = np.abs(mapping.detDF(X)) * W[None, :]  # (ne, nq)
    phi = np.empty((nb, X.shape[1]))
    dphi = np.empty((nb, 3, X.shape[1]))
    for a in range(nb):
        phi[a], dphi[a] = elem.lbasis(X, a)
    # physical gradients grad phi_a = invDF^T dphi_a, as scikit-fem's ElementH1.gbasis;
    # laid out (ne, nq, 3, nb) so that the products below are contiguous matmuls
    inv_t = np.ascontiguousarray(inv_df.transpose(2, 3, 1, 0))  # (ne, nq, k, i)
    grads = np.matmul(inv_t, np.ascontiguousarray(dphi.transpose(2, 1, 0)))  # (ne, nq, k, nb)
    g = [np.ascontiguousarray(grads[:, :, k, :]) for k in range(3)]  # (ne, nq, nb)
    gw = [np.ascontiguousarray((gk * dx[:, :, None]).transpose(0, 2, 1)) for gk in g]

    rows = np.broadcast_to(element_dofs.T[:, :, None], (ne, nb, nb)).ravel()
    cols = np.broadcast_to(element_dofs.T[:, None, :], (ne, nb, nb)).ravel()

    def scalar(local: np.ndarray) -> sp.csc_matrix:
        return sp.coo_matrix((local.ravel(), (rows, cols)), shape=(n, n)).tocsc()

    S = {}
    for i in range(3):
        for j in range(i, 3):
            S[i, j] = scalar(np.matmul(gw[i], g[j]))  # integral d_i phi_a d_j phi_b
    E, nu = material.youngs_modulus_pa, material.poisson_ratio
    lam = E * nu / ((1 + nu) * (1 - 2 * nu))
    mu = E / (2 * (1 + nu))
    lap = S[0, 0] + S[1, 1] + S[2, 2]
    blocks = [[None] * 3 for _ in range(3)]
    for i in range(3):
        blocks[i][i] = (lam + mu) * S[i, i] + mu * lap
        for j in range(i + 1, 3):
            blocks[i][j] = lam * S[i, j] + mu * S[i, j].T
            blocks[j][i] = blocks[i][j].T
    K = sp.bmat(blocks, format="csc")
    K = 0.5 * (K + K.T)
    local_mass = material.density_kg_m3 * np.einsum("aq,bq,eq->eab", phi, phi, dx, optimize=True)
    Ms = scalar(local_mass)
    Ms = 0.5 * (Ms + Ms.T)
    M = sp.block_diag([Ms, Ms, Ms], format="csc")

    locs = mapping.F(elem.doflocs.T)  # (3, ne, nb)
    xyz = np.empty((3, n))
    xyz[:, element_dofs.T.ravel()] = locs.reshape(3, -1)
    return K, M, Ms, xyz


# ---------------------------------------------------------------------------------------
# Mode analysis
# ---------------------------------------------------------------------------------------


def _group(keys: np.ndarray) -> tuple[np.ndarray, int]:
    _, inv = np.unique(keys, return_inverse=True)
    return inv.ravel(), int(inv.max()) + 1


def _lattice_index(values: np.ndarray, scale: float) -> np.ndarray:
    return np.unique(np.round(values / scale, 9), return_inverse=True)[1].ravel()


class _Analyser:
    """Shape measures on the node lattice of one mesh."""

    def __init__(self, geometry: BarGeometry, ref: np.ndarray, xyz: np.ndarray, w: np.ndarray):
        self.xyz = xyz
        self.w = w  # lumped node mass, kg
        scale = geometry.length_m
        ix = _lattice_index(ref[0], scale)
        iy = _lattice_index(ref[1], scale)
        iz = _lattice_index(ref[2], scale)
        self.mirror = None
        if np.max(xyz[1]) > 0.75 * geometry.width_m:  # whole width meshed
            ny = int(iy.max()) + 1
            nz = int(iz.max()) + 1
            key = (ix * ny + iy) * nz + iz
            mirror_key = (ix * ny + (ny - 1 - iy)) * nz + iz
            order = np.argsort(key)
            pos = np.minimum(np.searchsorted(key[order], mirror_key), len(key) - 1)
            if np.any(key[order][pos] != mirror_key):
                raise RuntimeError("mesh is not symmetric about the mid-width plane")
            self.mirror = order[pos]
        self.slice, self.n_slices = _group(ix)
        w_s = np.bincount(self.slice, w, self.n_slices)
        self.w_slice = w_s
        # the section centroid lies on the mid-width plane, also for a half mesh
        self.zc = np.bincount(self.slice, w * xyz[2], self.n_slices) / w_s
        dy = xyz[1] - geometry.width_m / 2
        dz = xyz[2] - self.zc[self.slice]
        self.dy, self.dz = dy, dz
        self.polar = np.bincount(self.slice, w * (dy**2 + dz**2), self.n_slices)
        # top centre line, sorted by x
        h0 = geometry.blank_thickness_m
        on_line = (np.abs(xyz[1] - geometry.width_m / 2) < 1e-9 * scale) & (
            np.abs(xyz[2] - h0) < 1e-9 * scale
        )
        line = np.nonzero(on_line)[0]
        self.line = line[np.argsort(xyz[0, line])]
        if len(self.line) % 2 != 1:
            raise RuntimeError("top centre line does not hold whole quadratic element edges")

    def measures(self, u: np.ndarray, symmetry: float | None = None) -> tuple[float, dict]:
        """Mirror symmetry and section-motion energy shares of a nodal field u (3, n).

        On a half mesh the symmetry is known from the plane condition and must be given;
        the shares are then those of the whole section (every sum over the whole section
        is twice the sum over the half, for symmetric and antisymmetric fields alike).
        """
        w = self.w
        total = float(np.sum(w * u * u))
        known = symmetry
        if symmetry is None:
            mirrored = u[:, self.mirror] * np.array([1.0, -1.0, 1.0])[:, None]
            sym = 0.5 * (u + mirrored)
            symmetry = float(np.sum(w * sym * sym)) / total
        s, n = self.slice, self.n_slices
        ws = self.w_slice
        mean = [np.bincount(s, w * u[k], n) / ws for k in range(3)]
        theta = np.bincount(s, w * (u[2] * self.dy - u[1] * self.dz), n) / self.polar
        shares = {
            "longitudinal": float(np.sum(ws * mean[0] ** 2)) / total,
            "lateral": float(np.sum(ws * mean[1] ** 2)) / total,
            "vertical": float(np.sum(ws * mean[2] ** 2)) / total,
            "torsional": float(np.sum(self.polar * theta**2)) / total,
        }
        if known is not None:
            # a half mesh holds one family only: the shares of the other vanish by symmetry
            vanishing = ("lateral", "torsional") if known > 0.5 else ("vertical", "longitudinal")
            for k in vanishing:
                shares[k] = 0.0
        return symmetry, shares

    def centreline(self, uz: np.ndarray) -> tuple[tuple[float, ...], tuple[float, ...]]:
        """u_z on the top centre line, scaled to (1/L) integral u_z^2 dx = 1, u_z(0) > 0.

        The integral is Simpson's rule on each element edge (its three nodes).
        """
        x = self.xyz[0, self.line]
        v = uz[self.line]
        h = x[2::2] - x[:-2:2]
        integral = float(np.sum(h / 6.0 * (v[:-2:2] ** 2 + 4.0 * v[1::2] ** 2 + v[2::2] ** 2)))
        scale = math.sqrt((x[-1] - x[0]) / integral) * (1.0 if v[0] >= 0 else -1.0)
        return tuple(float(a) for a in x), tuple(float(a) for a in scale * v)

    def zero_crossings(self, uz: np.ndarray) -> tuple[float, ...]:
        """Zero crossings of the quadratic FE interpolant of u_z along the top centre line."""
        x = self.xyz[0, self.line]
        v = uz[self.line]
        vmax = float(np.max(np.abs(v)))
        found: list[float] = []
        for k in range(0, len(x) - 2, 2):
            x0, x1, x2 = x[k : k + 3]
            v0, v1, v2 = v[k : k + 3]
            # quadratic through the three edge nodes, in t = (x - x0)/(x2 - x0) in [0, 1];
            # the top face is flat and the mapping affine in x there, so this is exact
            tm = (x1 - x0) / (x2 - x0)
            # v(t) = p t^2 + q t + v0
            det = tm * tm - tm
            p = ((v1 - v0) - (v2 - v0) * tm) / det
            q = (v2 - v0) - p
            roots = np.roots([p, q, v0]) if abs(p) > 1e-14 * vmax else np.roots([q, v0])
            for r in np.atleast_1d(roots):
                if abs(r.imag) < 1e-12 and -1e-12 <= r.real < 1.0 - 1e-12:
                    found.append(float(x0 + r.real * (x2 - x0)))
        return tuple(sorted(found))


def _classify(symmetry: float, shares: dict) -> str:
    """Kind of a mode from its mirror symmetry and the largest section-motion share.

    Vertical and longitudinal motion are symmetric about the mid-width plane, lateral and
    torsional motion antisymmetric; a mode whose largest share is under one half, or whose
    symmetry disagrees with that share, is ``"other"`` (plate-like modes across the width,
    mixed modes).
    """
    kind = max(shares, key=shares.get)
    if shares[kind] < 0.5:
        return "other"
    symmetric = kind in ("vertical", "longitudinal")
    if symmetric and symmetry < 0.9 or not symmetric and symmetry > 0.1:
        return "other"
    return kind


# ---------------------------------------------------------------------------------------
# Solve
# ---------------------------------------------------------------------------------------


def _eb_first_omega(geometry: BarGeometry, material: Material) -> float:
    """Euler-Bernoulli free-free mode-1 angular frequency for the mean thickness, rad/s.

    Used as a scale for the spectral shift only (Blevins 1979, table 8-1).
    """
    x = np.linspace(0.0, geometry.length_m, 101)
    h = float(np.mean(np.asarray(geometry.profile(x), float)))
    c = math.sqrt(material.youngs_modulus_pa / (12.0 * material.density_kg_m3))
    return 4.730041**2 / geometry.length_m**2 * h * c


def _lowest_modes(K, M, n_rigid: int, n_elastic: int, om_scale: float):
    """Lowest ``n_rigid + n_elastic`` eigenpairs of (K, M) by shift-invert [3].

    The shift is small and negative, so ``K - sigma M`` is positive definite and the
    eigenvalues nearest it are the rigid-body ones (zero), then the lowest elastic ones.
    Returns the elastic eigenvalues and vectors and the largest |rigid eigenvalue| over
    the lowest elastic one.
    """
    from threadpoolctl import threadpool_limits

    sigma = -0.01 * om_scale**2
    k = min(n_rigid + n_elastic, K.shape[0] - 2)
    v0 = np.random.default_rng(7).standard_normal(K.shape[0])
    with threadpool_limits(limits=1):
        # minimum-degree ordering on A^T + A suits the symmetric K - sigma M
        # (symmetric mode: K - sigma M is positive definite, so no pivoting is needed)
        lu = sla.splu(
            (K - sigma * M).tocsc(),
            permc_spec="MMD_AT_PLUS_A",
            diag_pivot_thresh=0.0,
            options={"SymmetricMode": True},
        )
        op_inv = sla.LinearOperator(K.shape, matvec=lu.solve, dtype=float)
        lam, vec = sla.eigsh(K, k=k, M=M, sigma=sigma, which="LM", v0=v0, OPinv=op_inv, tol=1e-10)
    order = np.argsort(lam)
    lam, vec = lam[order], vec[:, order]
    ratio = float(np.max(np.abs(lam[:n_rigid])) / lam[n_rigid])
    if ratio > 1e-6:
        raise RuntimeError(
            f"rigid-body modes not separated: |lambda_{n_rigid}| / lambda_{n_rigid + 1} "
            f"= {ratio:.3g}; is the mesh connected?"
        )
    return lam[n_rigid:], vec[:, n_rigid:], ratio


def solve_bar(
    geometry: BarGeometry,
    material: Material = ALUMINIUM_6061,
    mesh: MeshSize = FINE_MESH,
    n_modes: int = 12,
    use_symmetry: bool = True,
) -> BarModes:
    """Lowest elastic modes of a free-free bar by 3-D finite elements.

    Results are cached on the (hashable, value-compared) arguments for the life of the
    process, however they are passed, so tests that share a bar share a solve; and on
    disk under :data:`CACHE_DIR`, keyed by the arguments, this file and the versions of
    numpy, scipy and scikit-fem, so later test runs read them back.

    Parameters
    ----------
    geometry : BarGeometry
        Bar and undercut.
    material : Material
        Isotropic material; default 6061 aluminium.
    mesh : MeshSize
        Element counts; default :data:`FINE_MESH`.
    n_modes : int
        Number of elastic modes wanted, >= 1.
    use_symmetry : bool
        The bar is symmetric about its mid-width plane y = b/2, so every mode is either
        symmetric (vertical, longitudinal) or antisymmetric (lateral, torsional) about it.
        True (default) solves the two families on half the width, with u_y = 0 or
        u_x = u_z = 0 on the plane: the same discrete modes at about half the cost.
        False solves the whole width in one eigenproblem (a check of the former).

    Returns
    -------
    BarModes
        Modes by increasing frequency, classified by kind.

    Raises
    ------
    RuntimeError
        If the six rigid-body modes do not separate from the elastic ones.
    """
    if n_modes < 1:
        raise ValueError(f"n_modes = {n_modes}: must be >= 1")
    return _solve_bar_cached(geometry, material, mesh, int(n_modes), bool(use_symmetry))


_CACHE_SETTING = os.environ.get("SOLID3D_CACHE")
CACHE_DIR: Path | None = (
    Path(__file__).resolve().parent.parent / ".cache" / "solid3d" if _CACHE_SETTING is None
    else Path(_CACHE_SETTING) if _CACHE_SETTING.strip() else None)
"""Folder of the on-disk result cache (it ignores itself for git); set ``SOLID3D_CACHE``
to move it, or to an empty string to switch the disk cache off (None)."""


_SOURCE_SHA256 = hashlib.sha256(Path(__file__).read_bytes()).hexdigest()
"""This file as it was imported: a change to the model makes every stored entry stale."""


def _disk_key(args: tuple) -> str | None:
    """Key of one solve: the inputs, this file's source and the library versions.

    None when an input has no stable text form (a profile compared by identity), so
    such solves are never stored.
    """
    import skfem

    text = repr(args)
    if " at 0x" in text:
        return None
    parts = (text, _SOURCE_SHA256, np.__version__, scipy.__version__, skfem.__version__)
    return hashlib.sha256("\n".join(parts).encode()).hexdigest()[:32]


def _disk_cached(func: Callable) -> Callable:
    """Keep results on disk between test runs, keyed by :func:`_disk_key`.

    A 3-D solve takes seconds to tens of seconds; its result depends only on the
    geometry, material, mesh and the code and libraries that compute it, all of which
    enter the key, so a stale entry cannot be read. Unreadable entries are recomputed.
    """

    @functools.wraps(func)
    def wrapper(*args):
        key = _disk_key(args) if CACHE_DIR is not None else None
        path = CACHE_DIR / f"{key}.pkl" if key else None
        if path is not None and path.is_file():
            try:
                with path.open("rb") as f:
                    return pickle.load(f)
            except Exception:  # a damaged or unreadable entry is recomputed
                pass
        result = func(*args)
        if path is not None:
            path.parent.mkdir(parents=True, exist_ok=True)
            ignore = CACHE_DIR / ".gitignore"  # the folder keeps itself out of git
            if not ignore.exists():
                ignore.write_text("# results cached by tests/reference/solid3d.py\n*\n")
            tmp = path.with_suffix(f".{os.getpid()}.tmp")
            with tmp.open("wb") as f:
                pickle.dump(result, f, protocol=pickle.HIGHEST_PROTOCOL)
            os.replace(tmp, path)
        return result

    return wrapper


@functools.lru_cache(maxsize=64)
@_disk_cached
def _solve_bar_cached(
    geometry: BarGeometry,
    material: Material,
    mesh: MeshSize,
    n_modes: int,
    use_symmetry: bool,
) -> BarModes:
    t0 = time.perf_counter()
    om_scale = _eb_first_omega(geometry, material)
    mesh2, ref = _build_mesh(geometry, mesh, half=use_symmetry)
    K, M, Ms, xyz = _assemble(mesh2, material)
    n = xyz.shape[1]
    lumped = np.asarray(Ms.sum(axis=1)).ravel()
    analyser = _Analyser(geometry, ref, xyz, lumped)
    found = []  # (eigenvalue, nodal field (3, n), symmetry or None)
    if use_symmetry:
        mass = 2.0 * float(lumped.sum())
        on_plane = np.abs(xyz[1] - geometry.width_m / 2) < 1e-9 * geometry.length_m
        n_dof = 0
        ratio = 0.0
        # symmetric family: u_y = 0 on the plane; rigid: x and z translation, y rotation
        # antisymmetric family: u_x = u_z = 0 there; rigid: y translation, x and z rotation
        for symmetry, fixed_components in ((1.0, (1,)), (0.0, (0, 2))):
            fixed = np.zeros(3 * n, dtype=bool)
            for c in fixed_components:
                fixed[c * n + np.nonzero(on_plane)[0]] = True
            free = np.nonzero(~fixed)[0]
            Kf = K[free][:, free]
            Mf = M[free][:, free]
            n_dof += len(free)
            lam, vec, r = _lowest_modes(Kf, Mf, 3, n_modes, om_scale)
            ratio = max(ratio, r)
            for k in range(len(lam)):
                u = np.zeros(3 * n)
                u[free] = vec[:, k]
                found.append((lam[k], u.reshape(3, n), symmetry))
    else:
        mass = float(lumped.sum())
        n_dof = K.shape[0]
        lam, vec, ratio = _lowest_modes(K, M, 6, n_modes, om_scale)
        found = [(lam[k], vec[:, k].reshape(3, n), None) for k in range(len(lam))]
    found.sort(key=lambda item: item[0])
    counts = dict.fromkeys(KINDS, 0)
    modes = []
    for index, (eigenvalue, u, known_symmetry) in enumerate(found[:n_modes], start=1):
        symmetry, shares = analyser.measures(u, known_symmetry)
        kind = _classify(symmetry, shares)
        counts[kind] += 1
        nodes, line_x, line_uz = (), (), ()
        if kind == "vertical":
            nodes = analyser.zero_crossings(u[2])
            line_x, line_uz = analyser.centreline(u[2])
        modes.append(
            Mode(
                index=index,
                frequency_hz=math.sqrt(eigenvalue) / (2 * math.pi),
                kind=kind,
                order=counts[kind],
                mirror_symmetry=symmetry,
                shares=shares,
                node_positions_m=nodes,
                centreline_x_m=line_x,
                centreline_uz=line_uz,
            )
        )
    return BarModes(
        geometry=geometry,
        material=material,
        mesh=mesh,
        modes=tuple(modes),
        n_dof=n_dof,
        mass_kg=mass,
        rigid_body_ratio=ratio,
        solve_time_s=time.perf_counter() - t0,
    )


def convergence(
    geometry: BarGeometry,
    material: Material = ALUMINIUM_6061,
    coarse: MeshSize = COARSE_MESH,
    fine: MeshSize = FINE_MESH,
    n_modes: int = 12,
) -> Convergence:
    """Solve on two meshes and report the change; the fine solve is the reference.

    Parameters
    ----------
    geometry, material, n_modes
        As for :func:`solve_bar`.
    coarse, fine : MeshSize
        The two meshes; defaults :data:`COARSE_MESH` and :data:`FINE_MESH`.

    Returns
    -------
    Convergence
        Both solves; ``relative_change(kind, order)`` gives the change per mode. Both
        come from the :func:`solve_bar` cache when already done, and
        ``solve_bar(geometry)`` returns the same object as ``convergence(geometry).fine``.
    """
    return Convergence(
        coarse=solve_bar(geometry, material, coarse, n_modes),
        fine=solve_bar(geometry, material, fine, n_modes),
    )


__all__ = [
    "ALUMINIUM_6061",
    "COARSE_MESH",
    "FINE_MESH",
    "KINDS",
    "ArchProfile",
    "BarGeometry",
    "BarModes",
    "Convergence",
    "Material",
    "MeshSize",
    "Mode",
    "SteppedProfile",
    "UniformProfile",
    "convergence",
    "solve_bar",
]
