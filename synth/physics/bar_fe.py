"""One-dimensional finite elements for a free-free bar of variable section.

Three uncoupled fields are solved for a bar hung free (cords are soft and act
only as losses, see :mod:`synth.physics.losses`):

* **vertical** bending (in the plane of the strike) by Timoshenko beam theory:
  shear deformation with Cowper's shear coefficient and rotary inertia, coupled to
  stretching because an undercut lowers each section's centroid below the flat
  top (the reference line is the blank's mid-plane; longitudinal modes of this
  field are recognised by their axial kinetic energy and left out);
* **lateral** bending (in the plane of the bar's width), also Timoshenko;
* **torsional** twisting about the bar's axis with the section's warping
  (Benscoter's theory: St Venant torsion constant and warping constant of the solid
  rectangle; warping held back where the section changes along an undercut
  stiffens the twist: 5 % on a deep arch against a 3-D solid model).

Elements are Lagrange elements of degree ``p`` (default 6) on Gauss-Lobatto
nodes, the same degree for deflection and section rotation.  Bending stiffness is
integrated with ``p + 3`` Gauss points, evaluating EI, EA and the torsion
constants from the local thickness h(x) at each point (never averaging h first,
since I grows as h**3).  The shear term is integrated with ``p`` points
(selective reduced integration), which removes shear locking.  Mass and rotary
inertia are lumped at the nodes by Gauss-Lobatto quadrature (Fried & Malkus
1975): the mass matrix is block-diagonal per node, the eigenproblem becomes a
standard one after a node-by-node scaling, and on the bars of this trade the
discretisation error is that of the consistent mass matrix (measured on 20 bars,
degrees 5 and 6, 4 to 12 elements: the same to two digits).

Mesh nodes are placed on every kink of a parametric undercut and on the strong
kinks of a station table (:func:`mesh_cuts`); each segment between them gets
elements in proportion to the bending waves it holds (thin sections carry shorter
waves).  The weak kinks of a densely measured profile stay inside elements, whose
section integrals then run piecewise over the stations (:func:`_spanning_values`),
so the mesh, and the cost, follow the bar's waves, not its station count.  The
first solve uses degree ``p - 1`` on that mesh, the second degree ``p``; if some
requested frequency changed by ``tolerance`` (default 1e-4, 0.01 %) or more, the
mesh is refined by 1.5 until it settles.

The lowest eigenvalues of each field are rigid-body motions and are skipped:
three in the vertical field (heave, pitch and sliding along the bar), two in the
lateral (sway, yaw) and one in torsion (roll).

Mode shapes are scaled so that, for bending, ``integral(rho A w**2 dx)`` equals
the bar's mass (the integral taken by the same nodal quadrature as the mass; a
uniform bar then has ``|w| = 2`` at its ends, the normalisation of Blevins'
tables) and, for torsion, ``integral(rho I_p theta**2 dx)`` equals the bar's
polar mass moment.  ``Mode.modal_mass`` is the full generalised mass
``v^T M v`` of that scaled vector (rotary inertia included), so a point force F
at x drives the modal coordinate q as ``q'' + ... = shape(x) F / modal_mass``.

References
----------
Timoshenko, S. P. (1921). On the correction for shear of the differential
    equation for transverse vibrations of prismatic bars. Phil. Mag. 41, 744-746.
Cowper, G. R. (1966). The shear coefficient in Timoshenko's beam theory.
    J. Appl. Mech. 33(2), 335-340, doi:10.1115/1.3625046 (Eq. for a rectangle).
Timoshenko, S. P. & Goodier, J. N. (1970). Theory of Elasticity, 3rd ed.,
    McGraw-Hill, ISBN 0-07-064720-8, section 109 (torsion of a rectangle).
Benscoter, S. U. (1954). A theory of torsion bending for multicell beams. J. Appl.
    Mech. 21, 25-34 (warping amplitude independent of the twist rate).
Vlasov, V. Z. (1961). Thin-walled elastic beams, 2nd ed., Israel Program for
    Scientific Translations (warping constant, bimoment).
Prathap, G. (1993). The Finite Element Method in Structural Mechanics.
    Kluwer, ISBN 0-7923-2492-6 (reduced integration and shear locking).
Fried, I. & Malkus, D. S. (1975). Finite element mass matrix lumping by numerical
    integration with no convergence rate loss. Int. J. Solids Struct. 11, 461-466.
"""

from __future__ import annotations

import bisect
import logging
import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from threadpoolctl import ThreadpoolController

from synth.errors import ModelError
from synth.physics.geometry import BarGeometry
from synth.physics.materials import Material

log = logging.getLogger(__name__)

KINDS = ("vertical", "lateral", "torsional")
_THREADS: ThreadpoolController | None = None


def one_blas_thread():
    """Context manager limiting BLAS to one thread (small eigenproblems run faster).

    The controller is built once; building it scans the loaded libraries, so
    scipy's own BLAS is loaded first (it is imported lazily elsewhere).
    """
    global _THREADS
    if _THREADS is None:
        import scipy.linalg  # noqa: F401  (its BLAS must be loaded to be limited)

        _THREADS = ThreadpoolController()
    return _THREADS.limit(limits=1, user_api="blas")
_RIGID = {"vertical": 3, "lateral": 2, "torsional": 1}
REFINE_FACTOR = 1.5
"""Each mesh refinement multiplies the elements of every segment by this (rounded up)."""
PHASE_PER_ELEMENT = 0.68
"""Start mesh: radians of bending wave per element, per unit of the first solve's
degree (3.4 rad for degree 5).  Measured on 79 bars (both demo ranges, caliper
tables, uniform, parabolic and deep arches): degree 5 on such a mesh is within
4e-5 of converged for the first five partials and degree 6 within 1.4e-6, so the
degree 5 -> 6 step settles the usual bar in two solves."""
AXIAL_SHARE = 0.5
"""A vertical-field mode whose kinetic energy is more than half axial is a
longitudinal mode, not a bending partial."""
KINK_SIZE = 0.01
"""A kink of a station table gets a mesh node when the slope jump times one radian
of bending wave (mode 5 of the blank, at the local thickness) exceeds this share of
the local thickness.  Weaker kinks, those of a densely measured smooth profile, are
left inside elements, whose integrals then run piecewise over the stations."""
MIN_LENGTH_PER_SIDE = 2.0
"""A bar shorter than twice its width or thickness is a block, not a beam: one-
dimensional bending and torsion no longer describe it (common practice, no source)."""
KINK_PHASE = 0.8
"""Kinks that get nodes are at least this many radians of the same wave apart (the
stronger one wins), a quarter of the start mesh's element at the default five
partials: however dense a table, the mesh holds a bounded number of nodes."""


def cowper_shear_coefficient(poisson_ratio: float) -> float:
    """Return Cowper's shear coefficient of a solid rectangle, k = 10(1+nu)/(12+11nu).

    References
    ----------
    Cowper (1966), J. Appl. Mech. 33, 335-340, table 1 (rectangle).
    """
    nu = poisson_ratio
    return 10.0 * (1.0 + nu) / (12.0 + 11.0 * nu)


def torsion_constant_rectangle(width, thickness, n_terms: int = 12):
    """Return St Venant's torsion constant J of a solid rectangle (m**4).

    ``J = (a b**3 / 3) [1 - (192 / pi**5) (b / a) sum_{n odd} tanh(n pi a / (2 b)) / n**5]``
    with ``a >= b`` the long and short sides.

    References
    ----------
    Timoshenko & Goodier (1970), Theory of Elasticity, section 109, Eq. (160).
    """
    w = np.asarray(width, dtype=float)
    t = np.asarray(thickness, dtype=float)
    a = np.maximum(w, t)
    b = np.minimum(w, t)
    n = np.arange(1, 2 * n_terms, 2, dtype=float)
    series = np.sum(np.tanh(np.multiply.outer(a / (2 * b), n * np.pi)) / n**5, axis=-1)
    return a * b**3 / 3.0 * (1.0 - 192.0 / np.pi**5 * (b / a) * series)


def _warping_function(y, z, a, c, n_terms: int = 60):
    """St Venant warping function of the rectangle |y| <= a, |z| <= c (a >= c), up to sign.

    ``yz - (32 c^2/pi^3) sum_{n odd} (-1)^((n-1)/2) / n^3 sinh(n pi y/2c) / cosh(n pi a/2c)
    sin(n pi z/2c)``: harmonic, with the traction-free edge conditions of torsion
    (Timoshenko & Goodier 1970, section 109).
    """
    out = y * z
    for k in range(n_terms):
        n = 2 * k + 1
        q = n * math.pi / (2.0 * c)
        ratio = np.sign(y) * (np.exp(q * (np.abs(y) - a)) - np.exp(-q * (np.abs(y) + a))) / (
            1.0 + np.exp(-2.0 * q * a))
        out = out - 32.0 * c * c / math.pi**3 * ((-1) ** k / n**3) * ratio * np.sin(q * z)
    return out


@lru_cache(maxsize=1)
def _warping_table() -> tuple[np.ndarray, np.ndarray]:
    """Gamma / (a_long^3 b_short^3) of a rectangle against the side ratio short/long."""
    ratios = np.geomspace(0.02, 1.0, 33)
    g, w = np.polynomial.legendre.leggauss(40)
    values = []
    for r in ratios:
        a, c = 0.5, 0.5 * r
        y, z = a * g[:, None], c * g[None, :]
        phi = _warping_function(y, z, a, c)
        values.append(float(np.sum(a * c * w[:, None] * w[None, :] * phi * phi)) / r**3)
    return np.log(ratios), np.array(values)


def warping_constant_rectangle(width, thickness):
    """Warping constant Gamma = integral(phi^2 dA) of a solid rectangle (m^6).

    From the St Venant warping function phi (series of Timoshenko & Goodier,
    section 109), tabulated against the side ratio; tends to b^3 h^3 / 144 for a
    thin rectangle (Roark's formulas, table of warping constants).
    """
    w = np.asarray(width, dtype=float)
    t = np.asarray(thickness, dtype=float)
    a, b = np.maximum(w, t), np.minimum(w, t)
    lr, vals = _warping_table()
    return a**3 * b**3 * np.interp(np.log(b / a), lr, vals)


# --------------------------------------------------------------------------------------
# Reference element
# --------------------------------------------------------------------------------------


@lru_cache(maxsize=16)
def _gll_nodes(p: int) -> np.ndarray:
    """Gauss-Lobatto-Legendre nodes on [-1, 1] for degree p."""
    if p == 1:
        return np.array([-1.0, 1.0])
    inner = np.polynomial.legendre.Legendre.basis(p).deriv().roots()
    return np.concatenate([[-1.0], np.sort(inner.real), [1.0]])


@lru_cache(maxsize=16)
def _gll_weights(p: int) -> np.ndarray:
    """Gauss-Lobatto-Legendre quadrature weights on the nodes of :func:`_gll_nodes`.

    w_k = 2 / (p (p + 1) P_p(x_k)**2) (Abramowitz & Stegun 25.4.32); exact for
    polynomials up to degree 2p - 1.
    """
    x = _gll_nodes(p)
    return 2.0 / (p * (p + 1) * np.polynomial.legendre.Legendre.basis(p)(x) ** 2)


def _lagrange(nodes: np.ndarray, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Values and derivatives of the Lagrange basis on ``nodes`` at points ``xi``.

    Evaluated through the monomial form (the nodes' Vandermonde inverse), which is
    well conditioned for the low degrees used here.  Returns arrays of shape
    ``(len(xi), len(nodes))``.
    """
    xi = np.atleast_1d(np.asarray(xi, dtype=float))
    coeff = _monomial_basis(len(nodes) - 1)  # (n, n): basis j = sum_k coeff[k, j] xi**k
    n = len(nodes)
    powers = xi[:, None] ** np.arange(n)[None, :]
    dpowers = np.zeros_like(powers)
    dpowers[:, 1:] = np.arange(1, n)[None, :] * powers[:, :-1]
    return powers @ coeff, dpowers @ coeff


@lru_cache(maxsize=16)
def _monomial_basis(p: int) -> np.ndarray:
    nodes = _gll_nodes(p)
    vander = nodes[:, None] ** np.arange(p + 1)[None, :]
    return np.linalg.inv(vander)


@lru_cache(maxsize=16)
def _reference(p: int):
    """Shape functions at the full and reduced Gauss points of degree p."""
    nodes = _gll_nodes(p)
    xf, wf = np.polynomial.legendre.leggauss(p + 3)
    xr, wr = np.polynomial.legendre.leggauss(p)
    nf, df = _lagrange(nodes, xf)
    nr, dr = _lagrange(nodes, xr)
    return nodes, (xf, wf, nf, df), (xr, wr, nr, dr)


@lru_cache(maxsize=16)
def _composite_rule(p: int):
    """Return the (2p + 1)-point Gauss rule of elements that span profile breakpoints.

    With moment-matched values (:func:`_spanning_values`) it integrates a section
    property times any polynomial of degree <= 2p exactly (every element integrand
    is one).
    """
    x, w = np.polynomial.legendre.leggauss(2 * p + 1)
    n, d = _lagrange(_gll_nodes(p), x)
    return x, w, n, d


@lru_cache(maxsize=16)
def _products(p: int) -> dict:
    """Weighted products of shape functions and derivatives at the Gauss points.

    ``(form, rule) -> (nq, n*n)``, with form NN (N_i N_j), DD (N_i' N_j') or DN
    (N_i' N_j) on the reference element and rule "full" or "reduced"; an element
    integral is then one matrix product with the section property.
    """
    _, (xf, wf, nf, df), (xr, wr, nr, dr) = _reference(p)
    _, wc, nc, dc = _composite_rule(p)
    stacked = (np.concatenate([wf, wc]), np.concatenate([nf, nc]), np.concatenate([df, dc]))
    out = {}
    for rule, (w, n, d) in {"full": (wf, nf, df), "reduced": (wr, nr, dr),
                            "stacked": stacked}.items():
        for form, (a, b) in {"NN": (n, n), "DD": (d, d), "DN": (d, n)}.items():
            out[(form, rule)] = (w[:, None, None] * a[:, :, None] * b[:, None, :]).reshape(
                len(w), -1)
    return out


def _integrate(prop: np.ndarray, form: str, rule: str, jac: np.ndarray, p: int) -> np.ndarray:
    """Element matrices (ne, p+1, p+1) of ``int prop * form dx`` (see :func:`_products`)."""
    table = _products(p)[(form, rule)]
    if prop.shape[1] != table.shape[0]:  # ordinary and spanning elements side by side
        table = _products(p)[(form, "stacked")]
    raw = prop @ table
    scale = {"NN": jac, "DD": 1.0 / jac, "DN": np.ones_like(jac)}[form]
    return (raw * scale[:, None]).reshape(len(jac), p + 1, p + 1)


# --------------------------------------------------------------------------------------
# Mesh and section properties
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Mesh:
    """Element edges along the bar and the polynomial degree."""

    edges_m: np.ndarray
    degree: int

    @property
    def n_elements(self) -> int:
        """Number of elements."""
        return len(self.edges_m) - 1

    @property
    def n_nodes(self) -> int:
        """Number of nodes (shared between neighbours)."""
        return self.n_elements * self.degree + 1

    def element_nodes(self) -> np.ndarray:
        """Physical node coordinates, shape (n_elements, degree + 1)."""
        nodes = _gll_nodes(self.degree)
        a, b = self.edges_m[:-1, None], self.edges_m[1:, None]
        return 0.5 * (a + b) + 0.5 * (b - a) * nodes[None, :]

    def connectivity(self) -> np.ndarray:
        """Global node index of each element node, shape (n_elements, degree + 1)."""
        e = np.arange(self.n_elements)[:, None]
        return e * self.degree + np.arange(self.degree + 1)[None, :]


def _wave_phase(bar: BarGeometry, x: np.ndarray) -> np.ndarray:
    """Radians of the blank's mode-5 bending wave from x = 0 to each ``x``.

    At a fixed frequency the bending wavenumber grows as the section thins,
    k(x) = beta sqrt(h0 / h(x)) (k**4 = rho A omega**2 / EI, A / I ~ 1 / h**2); beta
    is that of free-free mode 5 of the blank, (2 * 5 + 1) pi / (2 L) (Blevins).
    """
    beta = 11.0 * math.pi / (2.0 * bar.length_m)
    grid = np.unique(np.concatenate([np.linspace(0.0, bar.length_m, 2049),
                                     bar.breakpoints()]))
    k = beta * np.sqrt(bar.thickness_m / bar.thickness_at(grid))
    phase = np.concatenate([[0.0], np.cumsum(0.5 * (k[1:] + k[:-1]) * np.diff(grid))])
    return np.interp(x, grid, phase)


@lru_cache(maxsize=8)
def mesh_cuts(bar: BarGeometry) -> tuple[float, ...]:
    """Return the positions that are element edges of every mesh (0, kinks, L).

    Every breakpoint of a parametric form and every step gets a node.  A station
    table's kinks get one when they are strong (:data:`KINK_SIZE`), the strongest
    first, no two closer than :data:`KINK_PHASE`; a densely measured smooth profile
    thus meshes like its smooth counterpart, while the few stations of a caliper
    table each keep their node.
    """
    pos, jump = bar.kinks()
    if np.all(np.isinf(jump)):  # parametric forms and steps: every breakpoint
        return (0.0, *(float(p) for p in pos), bar.length_m)
    h = bar.thickness_at(pos)
    one_radian = np.sqrt(h / bar.thickness_m) * 2.0 * bar.length_m / (11.0 * math.pi)
    size = np.where(np.isinf(jump), np.inf, jump * one_radian / h)
    phase = _wave_phase(bar, pos)
    order = np.argsort(-size, kind="stable")
    kept_phase: list[float] = []
    kept = []
    for i in order:
        if size[i] < KINK_SIZE:
            break
        j = bisect.bisect_left(kept_phase, phase[i])
        near = any(abs(kept_phase[m] - phase[i]) < KINK_PHASE
                   for m in (j - 1, j) if 0 <= m < len(kept_phase))
        if np.isinf(size[i]) or not near:
            kept_phase.insert(j, phase[i])
            kept.append(float(pos[i]))
    return (0.0, *sorted(kept), bar.length_m)


def segment_counts(bar: BarGeometry, n_elements: int) -> tuple[int, ...]:
    """Elements per segment between mesh cuts, in proportion to segment length (>= 1)."""
    cuts = mesh_cuts(bar)
    seg = np.diff(cuts)
    return tuple(int(c) for c in np.maximum(1, np.round(n_elements * seg / bar.length_m)))


def make_mesh(bar: BarGeometry, n_elements: int, degree: int = 5,
              counts: tuple[int, ...] | None = None) -> Mesh:
    """Mesh the bar with about ``n_elements`` elements, nodes on :func:`mesh_cuts`.

    Elements are shared among the segments between cuts in proportion to their
    length (at least one each), so a symmetric profile gets a symmetric mesh.
    ``counts`` fixes the elements per segment instead, so that a mesh follows a
    changing profile continuously (inside an optimiser).
    """
    cuts = mesh_cuts(bar)
    if counts is None:
        counts = segment_counts(bar, n_elements)
    elif len(counts) != len(cuts) - 1:
        raise ModelError(f"{len(counts)} segment counts for {len(cuts) - 1} segments")
    edges = [0.0]
    for (a, b), c in zip(zip(cuts[:-1], cuts[1:], strict=True), counts, strict=True):
        edges.extend(np.linspace(a, b, c + 1)[1:])
    edges[-1] = bar.length_m
    return Mesh(np.asarray(edges), degree)


@dataclass(frozen=True)
class _Sections:
    """Section properties at the Gauss points and the nodes of every element.

    An element that spans breakpoints of the profile (weak kinks of a dense station
    table) carries moment-matched values instead of point values, see
    :func:`_spanning_values`.  Its full-rule values sit at the 2p + 1 points of
    :func:`_composite_rule`, in extra columns after the p + 3 ordinary ones; the
    other elements hold zeros there, and spanning elements zeros in the ordinary
    columns, so one product integrates both kinds.
    """

    jac: np.ndarray  # (ne,) dx/dxi
    full: dict  # name -> (ne, nq) at full points (nq = p + 3, or p + 3 + 2p + 1)
    reduced: dict  # name -> (ne, nr) at reduced points
    nodal: dict  # name -> (ne, p+1) at the element's Gauss-Lobatto nodes
    weights: np.ndarray  # (nq,) full-rule weights on the reference element

    def total(self, name: str) -> float:
        """Integral of a full-rule property over the bar."""
        return float(np.sum(self.full[name] * self.weights[None, :] * self.jac[:, None]))


SUBINTERVAL_POINTS_EXTRA = 3
"""Gauss points per profile sub-interval inside a spanning element: ``degree + 3``,
exact for a cubic section property (EI ~ h**3 with h linear between stations)
times a polynomial of degree up to 2 * degree + 2."""


def _section_values(bar: BarGeometry, mat: Material, h: np.ndarray) -> tuple[dict, dict, dict]:
    """Return the section properties from the local thickness h for each rule.

    Full, reduced and nodal dicts, evaluated pointwise (I ~ h**3: never from an
    averaged h).
    """
    E, rho, G = mat.youngs_modulus_pa, mat.density_kg_m3, mat.shear_modulus_pa
    k = cowper_shear_coefficient(mat.poisson_ratio)
    bw = bar.width_m
    # Vertical bending about the blank's mid-plane z_r = h0/2 (top face flat at h0,
    # section from h0 - h to h0): first moment S = A e, e = (h0 - h)/2 the centroid's
    # offset, and I_r = I_c + A e^2.
    area = bw * h
    ecc = 0.5 * (bar.thickness_m - h)
    first, i_ref = area * ecc, bw * h**3 / 12.0 + area * ecc**2
    polar = bw * h * (bw**2 + h**2) / 12.0
    torsion = torsion_constant_rectangle(bw, h)
    warping = warping_constant_rectangle(bw, h)
    full = {"EA": E * bw * h, "ES": E * first, "EI_r": E * i_ref,
            "EI_l": E * h * bw**3 / 12.0, "GJ": G * torsion, "EGamma": E * warping,
            "rhoA": rho * bw * h, "rhoIp": rho * polar, "h": h}
    reduced = {"kGA": k * G * bw * h, "G(Ip-J)": G * (polar - torsion)}
    nodal = {"rhoA": rho * bw * h, "rhoS": rho * first, "rhoI_r": rho * i_ref,
             "rhoI_l": rho * h * bw**3 / 12.0, "rhoIp": rho * polar, "rhoGamma": rho * warping}
    return full, reduced, nodal


def _sections(bar: BarGeometry, mat: Material, mesh: Mesh) -> _Sections:
    """Return the section properties where each rule needs them.

    Stiffness (and the mass integral) at the full Gauss points, shear-like terms
    at the reduced points, inertia at the nodes (where the mass is lumped).
    """
    p = mesh.degree
    nodes, (xf, wf, _, _), (xr, _, _, _) = _reference(p)
    a, b = mesh.edges_m[:-1, None], mesh.edges_m[1:, None]
    jac = 0.5 * (b - a)[:, 0]

    def at(xi):
        return bar.thickness_at(0.5 * (a + b) + 0.5 * (b - a) * xi[None, :])

    full = _section_values(bar, mat, at(xf))[0]
    reduced = _section_values(bar, mat, at(xr))[1]
    nodal = _section_values(bar, mat, at(nodes))[2]
    weights = wf
    spanning = _spanning_values(bar, mat, mesh)
    if spanning is not None:
        idx, s_full, s_reduced, s_nodal = spanning
        weights = np.concatenate([wf, _composite_rule(p)[1]])
        for name, v in full.items():
            wide = np.zeros((mesh.n_elements, len(weights)))
            wide[:, :len(wf)] = v
            wide[idx] = 0.0
            wide[idx, len(wf):] = s_full[name]
            full[name] = wide
        for values, spans in ((reduced, s_reduced), (nodal, s_nodal)):
            for name in values:
                values[name][idx] = spans[name]
    return _Sections(jac, full, reduced, nodal, weights)


def _spanning_values(bar: BarGeometry, mat: Material, mesh: Mesh):
    """Moment-matched section values of the elements that span profile breakpoints.

    Inside such an element the profile is only piecewise smooth (linear between
    stations), so a Gauss rule on the element would integrate its section
    properties with an error of the order of the kinks.  Instead every property P
    is integrated piecewise, over the sub-intervals between the breakpoints, with
    ``degree + 3`` Gauss points each (exact for polynomials of degree 2p + 5).  The
    bending, stretching, shear and inertia properties are polynomials of degree <= 3
    in x between linear stations, and the weights below of degree <= 2p, so these
    integrals are exact to rounding; the torsion and warping constants are smooth
    functions of h, and their relative error is that of a (p + 3)-point Gauss rule
    on one station interval, O((dx |h'| / h)**(2p + 6)).  From them:

    * full rule: Legendre moments mu_k = int P P_k, k <= 2p, give the values of the
      degree-2p L2 projection of P at the ``2p + 1`` points of :func:`_composite_rule`;
      that rule then integrates P times any polynomial of degree <= 2p exactly, and
      every stiffness integrand is P times such a polynomial;
    * reduced rule (p points): the degree p - 1 projection at its points, so that the
      rule integrates P times any polynomial of degree p - 1 exactly (for P of
      degree <= p this is P at the points: the ordinary reduced rule);
    * nodal (Gauss-Lobatto lumping): int P N_i / w_i, so that the lumped mass is
      the exact int P N_i (for P of degree < p: P at the node, the ordinary lumping).

    Returns None when no element spans a breakpoint, else (element indices, full,
    reduced, nodal value dicts for those elements).
    """
    p = mesh.degree
    bp = np.asarray(bar.breakpoints(), dtype=float)
    if len(bp) == 0:
        return None
    edges = mesh.edges_m
    tol = 1e-12 * bar.length_m
    lo = np.searchsorted(bp, edges[:-1] + tol, side="right")
    hi = np.searchsorted(bp, edges[1:] - tol, side="left")
    idx = np.flatnonzero(hi > lo)
    if len(idx) == 0:
        return None
    # sub-intervals of the spanning elements, grouped by element
    sub = [np.concatenate([[edges[e]], bp[lo[e]:hi[e]], [edges[e + 1]]]) for e in idx]
    sub_a = np.concatenate([s[:-1] for s in sub])
    sub_b = np.concatenate([s[1:] for s in sub])
    owner = np.repeat(np.arange(len(idx)), [len(s) - 1 for s in sub])
    g, wg = np.polynomial.legendre.leggauss(p + SUBINTERVAL_POINTS_EXTRA)
    n_mom = 2 * p + 1
    moments: dict = {}
    gll_moments: dict = {}
    chunk = 4096
    for i0 in range(0, len(sub_a), chunk):
        sa, sb, own = sub_a[i0:i0 + chunk], sub_b[i0:i0 + chunk], owner[i0:i0 + chunk]
        ea, eb = edges[idx[own]], edges[idx[own] + 1]
        x = 0.5 * (sa + sb)[:, None] + 0.5 * (sb - sa)[:, None] * g[None, :]
        xi = ((2.0 * x - (ea + eb)[:, None]) / (eb - ea)[:, None]).ravel()
        w = (wg[None, :] * ((sb - sa) / (eb - ea))[:, None]).ravel()  # reference measure
        leg = np.polynomial.legendre.legvander(xi, n_mom - 1) * w[:, None]
        shape = np.polynomial.polynomial.polyvander(xi, p) @ _monomial_basis(p) * w[:, None]
        full, reduced, nodal = _section_values(bar, mat, bar.thickness_at(x.ravel()))
        starts = np.flatnonzero(np.r_[True, own[1:] != own[:-1]])
        which = own[starts]
        starts = starts * len(g)
        for name, v in {**full, **reduced}.items():
            acc = moments.setdefault(name, np.zeros((len(idx), n_mom)))
            acc[which] += np.add.reduceat(v[:, None] * leg, starts, axis=0)
        for name, v in nodal.items():
            acc = gll_moments.setdefault(name, np.zeros((len(idx), p + 1)))
            acc[which] += np.add.reduceat(v[:, None] * shape, starts, axis=0)
    xc = _composite_rule(p)[0]
    _, (_, _, _, _), (xr, _, _, _) = _reference(p)
    k = np.arange(n_mom)
    to_full = (0.5 * (2 * k + 1))[:, None] * np.polynomial.legendre.legvander(xc, n_mom - 1).T
    kr = np.arange(p)
    to_reduced = (0.5 * (2 * kr + 1))[:, None] * np.polynomial.legendre.legvander(xr, p - 1).T
    s_full = {n: moments[n] @ to_full for n in ("EA", "ES", "EI_r", "EI_l", "GJ", "EGamma",
                                                 "rhoA", "rhoIp", "h")}
    s_reduced = {n: moments[n][:, :p] @ to_reduced for n in ("kGA", "G(Ip-J)")}
    s_nodal = {n: m / _gll_weights(p)[None, :] for n, m in gll_moments.items()}
    return idx, s_full, s_reduced, s_nodal


# --------------------------------------------------------------------------------------
# Assembly
# --------------------------------------------------------------------------------------


def _assemble(mesh: Mesh, blocks: list[tuple[int, int, np.ndarray]], n_fields: int):
    """Scatter element blocks (ne, n, n) into a dense matrix with field-block layout."""
    nn = mesh.n_nodes
    size = n_fields * nn
    conn = mesh.connectivity()
    flat_idx = []
    weights = []
    for fi, fj, ke in blocks:
        rows = (conn + fi * nn)[:, :, None]
        cols = (conn + fj * nn)[:, None, :]
        flat_idx.append((rows * size + cols).ravel())
        weights.append(ke.ravel())
    out = np.bincount(np.concatenate(flat_idx), weights=np.concatenate(weights),
                      minlength=size * size)
    return out.reshape(size, size)


def _nodal_sum(mesh: Mesh, sec: _Sections, name: str) -> np.ndarray:
    """Gauss-Lobatto quadrature of a section property, gathered per node, (n_nodes,)."""
    weights = _gll_weights(mesh.degree)[None, :] * sec.jac[:, None]
    return np.bincount(mesh.connectivity().ravel(), (sec.nodal[name] * weights).ravel(),
                       minlength=mesh.n_nodes)


def _lumped(mesh: Mesh, sec: _Sections, diagonal: list[str],
            coupled: tuple[int, int, str] | None = None) -> np.ndarray:
    """Mass lumped at the nodes: one small (fields x fields) block per node.

    ``diagonal`` names the inertia of each field; ``coupled`` = (i, j, name) adds
    the inertia coupling two fields at the same node.
    """
    nf = len(diagonal)
    out = np.zeros((mesh.n_nodes, nf, nf))
    for i, name in enumerate(diagonal):
        out[:, i, i] = _nodal_sum(mesh, sec, name)
    if coupled is not None:
        i, j, name = coupled
        out[:, i, j] = out[:, j, i] = _nodal_sum(mesh, sec, name)
    return out


def _bending_system(mesh: Mesh, sec: _Sections, ei: str, rhoi: str):
    """Stiffness and nodal mass of Timoshenko bending; DOF blocks [w..., psi...].

    Bending (EI psi'^2) uses the full Gauss rule, the shear term kGA (w' - psi)^2
    the reduced one; mass and rotary inertia are lumped at the nodes.
    """
    p, jac, f, r = mesh.degree, sec.jac, sec.full, sec.reduced
    k_pp = _integrate(f[ei], "DD", "full", jac, p)
    k_ww = _integrate(r["kGA"], "DD", "reduced", jac, p)
    k_wp = -_integrate(r["kGA"], "DN", "reduced", jac, p)
    k_ps = _integrate(r["kGA"], "NN", "reduced", jac, p)
    K = _assemble(mesh, [(0, 0, k_ww), (0, 1, k_wp), (1, 0, np.swapaxes(k_wp, 1, 2)),
                         (1, 1, k_pp + k_ps)], 2)
    return K, _lumped(mesh, sec, ["rhoA", rhoi])


def _vertical_system(mesh: Mesh, sec: _Sections):
    """Vertical bending coupled to stretching; DOF blocks [w..., psi..., u...].

    The reference line is the blank's mid-plane.  With the top face flat, an
    undercut moves each section's centroid below it by e(x), so bending and
    stretching couple through the first moment S = A e:
    ``U = 1/2 int [EA u'^2 - 2 E S u' psi' + E I_r psi'^2 + kGA (w' - psi)^2]``,
    ``T = 1/2 int [rho A (u'^2 + w'^2) - 2 rho S u' psi' + rho I_r psi'^2]`` (dots for
    time derivatives).  For a uniform bar S = 0 and the fields separate.
    """
    p, jac, f, r = mesh.degree, sec.jac, sec.full, sec.reduced
    k_ww = _integrate(r["kGA"], "DD", "reduced", jac, p)
    k_wp = -_integrate(r["kGA"], "DN", "reduced", jac, p)
    k_ps = _integrate(r["kGA"], "NN", "reduced", jac, p)
    k_up = -_integrate(f["ES"], "DD", "full", jac, p)
    K = _assemble(mesh, [(0, 0, k_ww), (0, 1, k_wp), (1, 0, np.swapaxes(k_wp, 1, 2)),
                         (1, 1, _integrate(f["EI_r"], "DD", "full", jac, p) + k_ps),
                         (2, 2, _integrate(f["EA"], "DD", "full", jac, p)),
                         (2, 1, k_up), (1, 2, np.swapaxes(k_up, 1, 2))], 3)
    # rho S couples psi and u at each node (the velocity term -2 rho S u_t psi_t).
    nodal = _lumped(mesh, sec, ["rhoA", "rhoI_r", "rhoA"], (1, 2, "rhoS"))
    nodal[:, 1, 2] *= -1.0
    nodal[:, 2, 1] *= -1.0
    return K, nodal


def _torsion_system(mesh: Mesh, sec: _Sections):
    """Torsion with warping (Benscoter); DOF blocks [theta..., beta...].

    The section warps as beta(x) phi(y, z) with phi the St Venant warping function,
    beta an independent warping rate:
    ``U = 1/2 int [G J theta'^2 + G (I_p - J)(theta' - beta)^2 + E Gamma beta'^2]``,
    ``T = 1/2 int [rho I_p theta_t^2 + rho Gamma beta_t^2]``.  Where beta can follow
    theta' freely (a uniform free bar) this is St Venant torsion; where warping is
    held back (sections changing along an undercut, short waves) E Gamma stiffens it.
    The coupling term is integrated with the reduced rule, like Timoshenko shear.
    """
    p, jac, f, r = mesh.degree, sec.jac, sec.full, sec.reduced
    kw = r["G(Ip-J)"]
    k_tt = _integrate(f["GJ"], "DD", "full", jac, p) + _integrate(kw, "DD", "reduced", jac, p)
    k_tb = -_integrate(kw, "DN", "reduced", jac, p)
    k_bb = _integrate(kw, "NN", "reduced", jac, p) + _integrate(f["EGamma"], "DD", "full", jac, p)
    K = _assemble(mesh, [(0, 0, k_tt), (0, 1, k_tb), (1, 0, np.swapaxes(k_tb, 1, 2)),
                         (1, 1, k_bb)], 2)
    return K, _lumped(mesh, sec, ["rhoIp", "rhoGamma"])


def _field_system(kind: str, mesh: Mesh, sec: _Sections) -> tuple[np.ndarray, np.ndarray]:
    """Assembled stiffness and nodal mass blocks (n_nodes, fields, fields) of one field."""
    if kind == "torsional":
        return _torsion_system(mesh, sec)
    if kind == "lateral":
        return _bending_system(mesh, sec, "EI_l", "rhoI_l")
    return _vertical_system(mesh, sec)


def _mass_matrix(nodal: np.ndarray) -> np.ndarray:
    """Return the nodal mass blocks as one dense matrix in the field-block DOF layout."""
    nn, nf, _ = nodal.shape
    M = np.zeros((nf * nn, nf * nn))
    idx = np.arange(nn)
    for i in range(nf):
        for j in range(nf):
            M[i * nn + idx, j * nn + idx] = nodal[:, i, j]
    return M


def field_matrices(kind: str, mesh: Mesh, sec: _Sections) -> tuple[np.ndarray, np.ndarray]:
    """Assembled stiffness and mass of one field (vertical, lateral or torsional), dense."""
    K, nodal = _field_system(kind, mesh, sec)
    return K, _mass_matrix(nodal)


# --------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Mode:
    """One vibration mode of the bar.

    Attributes
    ----------
    kind : {"vertical", "lateral", "torsional"}
    order : int
        1 for the lowest flexible mode of its kind.
    frequency_hz : float
    nodes_m : tuple of float
        Positions along the bar where the shape (deflection, or twist) is zero.
    modal_mass : float
        Generalised mass of the scaled shape: kg for bending, kg m**2 for torsion.
    """

    kind: str
    order: int
    frequency_hz: float
    nodes_m: tuple[float, ...]
    modal_mass: float
    mesh: Mesh = field(repr=False, compare=False)
    values: np.ndarray = field(repr=False, compare=False)  # (ne, p+1) deflection or twist
    rotation: np.ndarray | None = field(default=None, repr=False, compare=False)
    vector: np.ndarray | None = field(default=None, repr=False, compare=False)
    axial: np.ndarray | None = field(default=None, repr=False, compare=False)

    @property
    def angular_frequency(self) -> float:
        """Angular frequency omega = 2 pi f in rad/s."""
        return 2.0 * math.pi * self.frequency_hz

    def shape_at(self, x, derivative: int = 0) -> np.ndarray:
        """Deflection (bending, m per unit q) or twist (torsion, rad per unit q) at x.

        Parameters
        ----------
        x : float or array, m
            Positions in [0, L].
        derivative : {0, 1}
            1 gives d/dx of the shape.
        """
        return _evaluate(self.mesh, self.values, x, derivative)

    def rotation_at(self, x, derivative: int = 0) -> np.ndarray:
        """Section rotation psi of a bending mode at x (rad per unit q), or d psi/dx."""
        if self.rotation is None:
            raise ModelError(f"a {self.kind} mode has no section rotation")
        return _evaluate(self.mesh, self.rotation, x, derivative)

    def axial_at(self, x, derivative: int = 0) -> np.ndarray:
        """Axial displacement u of the blank's mid-plane (vertical modes), or du/dx."""
        if self.axial is None:
            raise ModelError(f"a {self.kind} mode carries no axial motion")
        return _evaluate(self.mesh, self.axial, x, derivative)

    def vertical_displacement_at(self, x, y_m: float = 0.0) -> np.ndarray:
        """Vertical motion at a point of the top face, per unit modal coordinate.

        ``y_m`` is the distance across the width from the centre line.  Vertical
        modes give w(x); torsional modes give ``y_m * theta(x)``; lateral modes
        move sideways only and give zero.
        """
        if self.kind == "vertical":
            return self.shape_at(x)
        if self.kind == "torsional":
            return y_m * self.shape_at(x)
        return np.zeros_like(np.asarray(x, dtype=float))


def _evaluate(mesh: Mesh, values: np.ndarray, x, derivative: int = 0) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    flat = np.atleast_1d(x).ravel()
    edges = mesh.edges_m
    e = np.clip(np.searchsorted(edges, flat, side="right") - 1, 0, mesh.n_elements - 1)
    a, b = edges[e], edges[e + 1]
    xi = 2.0 * (flat - a) / (b - a) - 1.0
    nodes = _gll_nodes(mesh.degree)
    val, der = _lagrange(nodes, xi)
    if derivative == 0:
        out = np.sum(val * values[e], axis=1)
    elif derivative == 1:
        out = np.sum(der * values[e], axis=1) * 2.0 / (b - a)
    else:
        raise ValueError("derivative must be 0 or 1")
    return out.reshape(x.shape) if x.ndim else out[0]


@dataclass(frozen=True)
class BarModes:
    """The computed modes of one bar.

    Attributes
    ----------
    geometry, material : the inputs.
    modes : tuple of Mode
        Sorted by kind (vertical, lateral, torsional) then order.
    n_elements : int
        Elements of the converged mesh.
    change : float
        Largest relative change of the vertical partials in the last refinement
        (of every kind when no vertical mode is asked for).
    mass_kg : float
    """

    geometry: BarGeometry
    material: Material
    modes: tuple[Mode, ...]
    n_elements: int
    change: float
    mass_kg: float

    def of_kind(self, kind: str) -> list[Mode]:
        """Modes of one kind, in order."""
        return [m for m in self.modes if m.kind == kind]

    @property
    def vertical(self) -> list[Mode]:
        """The vertical bending modes (the tuned partials), in order."""
        return self.of_kind("vertical")

    def mode(self, kind: str, order: int) -> Mode:
        """Return one mode by kind and order."""
        for m in self.modes:
            if m.kind == kind and m.order == order:
                return m
        raise ModelError(f"no {kind} mode of order {order} was computed")

    def by_frequency(self) -> list[Mode]:
        """All modes sorted by frequency."""
        return sorted(self.modes, key=lambda m: m.frequency_hz)

    @property
    def fundamental_hz(self) -> float:
        """Frequency of vertical mode 1."""
        return self.vertical[0].frequency_hz


# --------------------------------------------------------------------------------------
# Solver
# --------------------------------------------------------------------------------------


def _node_scaling(nodal: np.ndarray):
    """Inverse Cholesky factors of the nodal mass blocks, as row operations.

    With D the block-diagonal matrix of these factors (D M D^T = I), the problem
    K v = lambda M v becomes the standard C y = lambda y with C = D K D^T, v = D^T y.
    In the field-block DOF layout D is a diagonal ``scale`` (length n) plus, for
    fields coupled at a node, terms ``(a, b, coef)``: row block a gains
    ``coef * row block b`` (b < a).
    """
    nf = nodal.shape[1]
    idx = np.arange(nf)
    if nf > 1 and np.any(nodal[:, ~np.eye(nf, dtype=bool)]):
        factors = np.linalg.inv(np.linalg.cholesky(nodal))
    else:
        factors = np.zeros_like(nodal)
        factors[:, idx, idx] = 1.0 / np.sqrt(nodal[:, idx, idx])
    scale = factors[:, idx, idx].T.ravel()
    extra = [(a, b, factors[:, a, b]) for a in range(nf) for b in range(a)
             if np.any(factors[:, a, b])]
    return scale, extra


def _apply_rows(scale, extra, nn: int, x: np.ndarray) -> np.ndarray:
    """D x for D from :func:`_node_scaling` (x has n rows)."""
    out = scale[:, None] * x
    for a, b, coef in extra:
        out[a * nn:(a + 1) * nn] += coef[:, None] * x[b * nn:(b + 1) * nn]
    return out


def _eig(K: np.ndarray, nodal: np.ndarray, n_skip: int, n_modes: int, vectors: bool = True):
    """Lowest eigenpairs of K v = lambda M v with M lumped in node blocks.

    Returns the flexible eigenvalues, their M-orthonormal vectors (or None), the
    skipped rigid-body eigenvalues and the rounding floor ``eps ||C||_inf`` below
    which an eigenvalue cannot be told from zero.  Solved in standard form after a
    node-by-node scaling, which costs O(n**2) instead of the O(n**3) of a general
    reduction.

    The floor: a symmetric eigensolver is backward stable, every computed eigenvalue
    is within about ``eps ||C||_2 = eps lambda_max`` of an exact one (Golub & Van
    Loan, Matrix Computations, symmetric eigenproblem chapter; from memory), and the
    largest row sum ``||C||_inf`` bounds ``lambda_max`` from above (Gershgorin).
    Measured on these matrices (8 to 256 elements, uniform, arched and slender bars,
    every field): rigid-body eigenvalues 0.03 to 0.7 ``eps lambda_max``, and
    ``||C||_inf`` 1.4 to 2.1 ``lambda_max``, whatever the size.  (The trace, used
    before, grows with the number of unknowns and so flagged fine meshes as
    unresolvable while their rigid-body eigenvalues stayed at rounding.)
    """
    nn = nodal.shape[0]
    hi = min(n_skip + n_modes, K.shape[0]) - 1
    scale, extra = _node_scaling(nodal)
    dk = _apply_rows(scale, extra, nn, K)
    c = _apply_rows(scale, extra, nn, dk.T)  # D K D^T = D (D K)^T, K symmetric
    floor = float(np.finfo(float).eps * np.max(np.sum(np.abs(c), axis=1)))
    import scipy.linalg  # here, not at the top: a cached voice plan never solves

    if not vectors:
        lam = scipy.linalg.eigh(c, subset_by_index=[0, hi], driver="evr",
                                check_finite=False, eigvals_only=True)
        return lam[n_skip:], None, lam[:n_skip], floor
    lam, y = scipy.linalg.eigh(c, subset_by_index=[0, hi], driver="evr", check_finite=False)
    vec = scale[:, None] * y  # v = D^T y
    for a, b, coef in extra:
        vec[b * nn:(b + 1) * nn] += coef[:, None] * y[a * nn:(a + 1) * nn]
    return lam[n_skip:], vec[:, n_skip:], lam[:n_skip], floor


def _find_zeros(mesh: Mesh, shapes: np.ndarray, length: float) -> list[tuple[float, ...]]:
    """Zeros along the bar of several FE shapes at once, on the element polynomials.

    Parameters
    ----------
    shapes : array (n_shapes, n_elements, degree + 1)
        Nodal values per element.

    Sign changes on a sub-grid of every element bracket the zeros; a secant
    start and safeguarded Newton steps on the exact element polynomial refine
    them to rounding.
    """
    p = mesh.degree
    sub = np.linspace(-1.0, 1.0, 4 * p + 1)
    coeff = shapes @ _monomial_basis(p).T  # (ns, ne, p+1) monomial coefficients in xi
    samples = np.polynomial.polynomial.polyval(sub, np.moveaxis(coeff, -1, 0))  # (ns, ne, nsub)
    tol = 1e-10 * np.max(np.abs(shapes), axis=(1, 2))[:, None, None]
    half = 0.5 * np.diff(mesh.edges_m)
    edges = mesh.edges_m[:-1]
    positions = edges[:, None] + (sub[None, :] + 1.0) * half[:, None]
    exact = np.abs(samples) <= tol
    found = [list(positions[exact[k]]) for k in range(len(shapes))]
    s0, s1 = samples[..., :-1], samples[..., 1:]
    k_idx, e_idx, i_idx = np.nonzero((s0 * s1 < 0) & ~exact[..., :-1] & ~exact[..., 1:])
    if len(k_idx):
        c = coeff[k_idx, e_idx]  # (nb, p+1)
        dc = c[:, 1:] * np.arange(1, p + 1)[None, :]
        lo, hi = sub[i_idx], sub[i_idx + 1]
        f_lo, f_hi = s0[k_idx, e_idx, i_idx], s1[k_idx, e_idx, i_idx]
        # Secant start inside the bracket, then safeguarded Newton steps on the
        # element polynomial (a simple root: quadratic convergence to rounding).
        x = lo - f_lo * (hi - lo) / (f_hi - f_lo)
        powers = np.arange(p + 1)
        for _ in range(5):
            xp = x[:, None] ** powers[None, :]
            with np.errstate(divide="ignore", invalid="ignore"):
                step = np.einsum("ij,ij->i", c, xp) / np.einsum("ij,ij->i", dc, xp[:, :-1])
            x = np.clip(x - np.where(np.isfinite(step), step, 0.0), lo, hi)
        z = edges[e_idx] + (x + 1.0) * half[e_idx]
        for k, zz in zip(k_idx, z, strict=True):
            found[k].append(zz)
    eps = 1e-6 * length
    out_all = []
    for zeros in found:
        zs = sorted(float(z) for z in zeros if eps < z < length - eps)
        out: list[float] = []
        for z in zs:
            if not out or z - out[-1] > eps:
                out.append(z)
        out_all.append(tuple(out))
    return out_all


def _solve_once(bar: BarGeometry, mesh: Mesh, sec: _Sections, counts: dict[str, int],
                vectors: bool = True):
    """Assemble and solve every field once; return the eigenpairs and rounding level.

    Per kind: (frequencies Hz, M-orthonormal vectors or None, the part of each
    vector's generalised mass carried by its first field (deflection or twist)).
    The rounding level is the largest relative error rounding may put on a returned
    frequency: ``floor / (2 lambda)`` of the lowest one (f ~ sqrt(lambda)).
    """
    results = {}
    rounding = 0.0
    for kind in KINDS:
        n = counts.get(kind, 0)
        if n <= 0:
            continue
        K, nodal = _field_system(kind, mesh, sec)
        if kind == "vertical":
            lam, vec, rigid, floor = _bending_only(K, nodal, n)
        else:
            lam, vec, rigid, floor = _eig(K, nodal, _RIGID[kind], n, vectors)
        if len(lam) < n:
            raise ModelError(f"{mesh.n_elements} elements of degree {mesh.degree} hold only "
                             f"{len(lam)} {kind} partials, {n} asked for: use more elements")
        # Rigid-body eigenvalues are zero to rounding; the bar is unmodellable when
        # the rounding floor comes near the first flexible eigenvalue.  The floor
        # grows with lambda_max (the stiffest, shortest waves of the mesh) while the
        # partials fall with the bar's slenderness: lambda_max / lambda_1 ~ (L / h)**2.
        if floor > 1e-3 * lam[0] or np.any(lam <= 0):
            raise ModelError(_too_slender(bar, kind, floor / (2.0 * abs(lam[0])), mesh))
        largest = float(np.max(np.abs(rigid)))
        if largest > max(1e-6 * lam[0], 10.0 * floor):
            raise ModelError(
                f"{kind} rigid-body motion not separated from the partials (largest "
                f"rigid eigenvalue {largest:.3g}, partial 1 {lam[0]:.3g}, rounding floor "
                f"{floor:.3g}): the section properties of this bar are inconsistent")
        rounding = max(rounding, floor / (2.0 * lam[0]))
        freqs = np.sqrt(lam) / (2.0 * np.pi)
        if vec is None:
            results[kind] = (freqs, None, None)
        else:
            nn = mesh.n_nodes
            results[kind] = (freqs, vec, nodal[:, 0, 0] @ vec[:nn] ** 2)
    return results, rounding


def _too_slender(bar: BarGeometry, kind: str, rounding: float, mesh: Mesh) -> str:
    """Message of a bar whose partials drown in rounding: name its proportions.

    The depth that matters is the thickness for vertical bending, the width for
    lateral bending, the smaller of the two for torsion.
    """
    thin = bar.thinnest_m()
    depth, what = {"vertical": (thin, "thinnest section"),
                   "lateral": (bar.width_m, "width")}.get(
        kind, (min(thin, bar.width_m), "thinner side"))
    return (f"the bar is too slender to model: length {bar.length_m:g} m over its {what} "
            f"{depth:g} m is {bar.length_m / depth:.3g} times; double precision then leaves "
            f"{kind} partial 1 uncertain by {rounding:.2g} (relative, on "
            f"{mesh.n_elements} elements; the model needs below 5e-4)")


def _check_beam(bar: BarGeometry) -> None:
    """Raise ModelError when the bar is too short for a beam model.

    Checked by :func:`solve_bar`; the optimisers' fast path
    (:func:`vertical_frequencies`) may probe such lengths on its way.
    """
    side = max(bar.width_m, bar.thickness_m)
    if bar.length_m < MIN_LENGTH_PER_SIDE * side:
        raise ModelError(
            f"length_m = {bar.length_m:g} m is too short for a beam of {bar.width_m:g} x "
            f"{bar.thickness_m:g} m section: the bar model needs at least "
            f"{MIN_LENGTH_PER_SIDE:g} times the larger side, {MIN_LENGTH_PER_SIDE * side:g} m")


def _bending_only(K: np.ndarray, nodal: np.ndarray, n: int):
    """Return the lowest n bending modes of the vertical field, longitudinal ones skipped.

    A mode whose kinetic energy is mostly axial (the u field; vectors are
    M-orthonormal, so the share is u^T M_uu u) is longitudinal.
    """
    nn = nodal.shape[0]
    extra = 2
    while True:
        lam, vec, rigid, floor = _eig(K, nodal, _RIGID["vertical"], n + extra, True)
        axial = nodal[:, 2, 2] @ vec[2 * nn:] ** 2
        keep = np.flatnonzero(axial < AXIAL_SHARE)
        if len(keep) >= n or len(lam) < n + extra:
            keep = keep[:n]
            return lam[keep], vec[:, keep], rigid, floor
        extra *= 2


def solve_bar(
    bar: BarGeometry,
    material: Material,
    *,
    n_vertical: int = 5,
    n_lateral: int = 2,
    n_torsional: int = 2,
    tolerance: float = 1e-4,
    degree: int = 6,
    n_elements: int | None = None,
    max_elements: int | None = None,
) -> BarModes:
    """Compute the bar's modes, refining the mesh until the frequencies settle.

    Parameters
    ----------
    bar : BarGeometry
    material : Material
    n_vertical, n_lateral, n_torsional : int
        How many flexible modes of each kind to return (>= 0).
    tolerance : float
        Stop refining when every returned frequency changes by less than this
        relative amount between two discretisations (1e-4 = 0.01 %).  The first
        two are the start mesh (:func:`start_mesh`) at ``degree - 1`` and at
        ``degree``; later ones refine the mesh by :data:`REFINE_FACTOR`.
    degree : int
        Polynomial degree of the final elements (1..6).
    n_elements : int, optional
        Use exactly this mesh and skip the refinement (for repeated solves of
        similar bars, e.g. inside an optimiser, once a mesh has been found to be
        converged).  ``change`` is then reported as NaN.
    max_elements : int, optional
        Refinement gives up (ModelError) beyond this many elements (default: 512,
        or 8 times the start mesh for long station tables).

    Returns
    -------
    BarModes
    """
    _check_beam(bar)
    counts = {"vertical": n_vertical, "lateral": n_lateral, "torsional": n_torsional}
    if min(counts.values()) < 0 or sum(counts.values()) == 0:
        raise ModelError("ask for at least one mode and no negative counts")
    if not 1 <= degree <= 6:
        raise ModelError(f"element degree {degree}: must be 1..6")
    # Refinement follows the vertical partials (the tuned ones); the other kinds are
    # solved once on the mesh that settles them.  Lateral and torsional fields are
    # smoother and are at least as well converged there (tests/convergence).
    lead = {"vertical": n_vertical} if n_vertical > 0 else counts
    rest = {k: v for k, v in counts.items() if k not in lead}

    def finish(res, mesh, sec, change):
        if rest:
            res = {**res, **_solve_once(bar, mesh, sec, rest)[0]}
        return _package(bar, material, mesh, res, sec, change)

    with one_blas_thread():
        if n_elements is not None:
            mesh = make_mesh(bar, n_elements, degree)
            sec = _sections(bar, material, mesh)
            return finish(_solve_once(bar, mesh, sec, lead)[0], mesh, sec, float("nan"))
        start = _start_counts(bar, max(counts.values()), degree)
        limit = max_elements or max(512, 8 * sum(start))
        prev, change = None, float("nan")
        for mesh in _refinements(bar, start, degree, limit):
            sec = _sections(bar, material, mesh)
            # The first solve only sets the baseline: frequencies without vectors.
            res, rounding = _solve_once(bar, mesh, sec, lead, vectors=prev is not None)
            freqs = np.concatenate([res[k][0] for k in KINDS if k in res])
            if prev is not None:
                change = float(np.max(np.abs(freqs / prev - 1.0)))
                if change < tolerance:
                    log.debug("converged at %d elements of degree %d, change %.2e",
                              mesh.n_elements, mesh.degree, change)
                    return finish(res, mesh, sec, change)
                if rounding > tolerance:
                    # finer meshes only raise the rounding floor (lambda_max ~ 1/h_e**2)
                    raise ModelError(
                        f"tolerance {tolerance:g} is below what double precision resolves "
                        f"for this bar: at {mesh.n_elements} elements the partials still "
                        f"change by {change:.1e} and rounding alone may move them by "
                        f"{rounding:.1e}; ask for {rounding:.0e} or more")
            prev = freqs
        raise ModelError(f"partials did not settle to {tolerance:g} within {limit} elements "
                         f"(last change {change:.1e}); the profile may be too rough to "
                         f"model as a beam, or allow more elements (max_elements)")


def start_mesh(bar: BarGeometry, n_modes: int = 5, degree: int = 6) -> Mesh:
    """Return the first mesh of the refinement, graded by the local bending wavelength.

    At the frequency of free-free mode ``n_modes`` of the blank (beta L =
    (2n + 1) pi / 2, Blevins' asymptotic root) a bending wave's wavenumber grows
    as the section thins, k(x) = beta sqrt(h0 / h(x)) (k**4 = rho A omega**2 / EI,
    and A / I goes as 1 / h**2).  Each segment between the cuts of
    :func:`mesh_cuts` gets enough elements
    to hold :data:`PHASE_PER_ELEMENT` times the first solve's degree radians of
    wave per element, at least one.
    """
    return make_mesh(bar, 0, degree, _start_counts(bar, n_modes, degree))


def _start_counts(bar: BarGeometry, n_modes: int, degree: int) -> tuple[int, ...]:
    """Elements per segment between the cuts of :func:`start_mesh`."""
    cuts = mesh_cuts(bar)
    beta = (2 * max(n_modes, 1) + 1) * math.pi / (2.0 * bar.length_m)
    t = np.linspace(0.0, 1.0, 33)
    a, b = np.asarray(cuts[:-1])[:, None], np.asarray(cuts[1:])[:, None]
    x = a + (b - a) * t[None, :]
    k = beta * np.sqrt(bar.thickness_m / bar.thickness_at(x))
    phase = np.trapezoid(k, x, axis=1)
    budget = PHASE_PER_ELEMENT * max(degree - 1, 1)
    return tuple(int(c) for c in np.maximum(1, np.ceil(phase / budget - 1e-9)))


def _refinements(bar: BarGeometry, counts: tuple[int, ...], degree: int, limit: int):
    """Yield the discretisations tried in turn.

    The start mesh (``counts`` elements per segment) one degree lower, the start
    mesh, then meshes refined by :data:`REFINE_FACTOR` up to ``limit`` elements.
    """
    first = make_mesh(bar, 0, degree, counts)
    if degree > 1:
        yield Mesh(first.edges_m, degree - 1)
    yield first
    grown = np.asarray(counts)
    while True:
        grown = np.ceil(REFINE_FACTOR * grown).astype(int)
        if grown.sum() > limit:
            return
        yield make_mesh(bar, 0, degree, tuple(int(c) for c in grown))


def _package(bar, material, mesh, res, sec, change) -> BarModes:
    """Scale the eigenvectors, find their nodes and wrap them as Modes."""
    mass = sec.total("rhoA")
    polar = sec.total("rhoIp")
    nn = mesh.n_nodes
    conn = mesh.connectivity()
    scaled = []
    for kind in KINDS:
        if kind not in res:
            continue
        freqs, vec, dmass = res[kind]
        target = polar if kind == "torsional" else mass
        scale = np.sqrt(target / dmass)
        scale = np.where(vec[0] < 0, -scale, scale)  # node 0 is x = 0: positive left end
        scaled.append((kind, freqs, vec * scale[None, :], scale**2))
    # The solver's vectors have unit generalised mass, so the scaled ones have scale**2.
    shapes = np.concatenate([np.moveaxis(v[:nn][conn], -1, 0) for _, _, v, _ in scaled])
    nodes = iter(_find_zeros(mesh, shapes, bar.length_m))  # every mode in one pass
    shape_iter = iter(shapes)
    modes = []
    for kind, freqs, vec, gm in scaled:
        rots = np.moveaxis(vec[nn:2 * nn][conn], -1, 0) if kind != "torsional" else None
        axial = np.moveaxis(vec[2 * nn:3 * nn][conn], -1, 0) if kind == "vertical" else None
        for j, f in enumerate(freqs):
            modes.append(Mode(kind, j + 1, float(f), next(nodes), float(gm[j]), mesh,
                              next(shape_iter), None if rots is None else rots[j], vec[:, j],
                              None if axial is None else axial[j]))
    return BarModes(bar, material, tuple(modes), mesh.n_elements, change, mass)


def vertical_frequencies(bar: BarGeometry, material: Material, n_modes: int, *,
                         n_elements: int = 12, degree: int = 5,
                         counts: tuple[int, ...] | None = None) -> np.ndarray:
    """Frequencies (Hz) of the first ``n_modes`` vertical modes on a fixed mesh.

    The fast path for optimisers: no refinement, no mode shapes.  Check the mesh
    once with :func:`solve_bar` and verify the final design with it too.
    """
    mesh = make_mesh(bar, n_elements, degree, counts)
    with one_blas_thread():
        res, _ = _solve_once(bar, mesh, _sections(bar, material, mesh), {"vertical": n_modes},
                             vectors=False)
    return res["vertical"][0]


def dense_reference_frequencies(bar: BarGeometry, material: Material,
                                mesh: Mesh) -> dict[str, np.ndarray]:
    """Every eigenpair of the assembled matrices by a full ``scipy.linalg.eigh``.

    The benchmark's reference: the same model and mesh, solved the plain way
    (general dense problem, every eigenvalue and vector).
    """
    import scipy.linalg

    sec = _sections(bar, material, mesh)
    out = {}
    with one_blas_thread():
        for kind in KINDS:
            K, M = field_matrices(kind, mesh, sec)
            lam = scipy.linalg.eigh(K, M)[0]  # every pair, shapes included
            out[kind] = np.sqrt(np.abs(lam[_RIGID[kind]:])) / (2 * np.pi)
    return out
