"""Stiffness calibration from a prototype bar: effective modulus and per-partial factors.

A prototype bar of known geometry, struck and recorded, pulls the model onto the
metal actually bought.  Two corrections are fitted to its vertical partials 1-3:

* the **effective Young's modulus** ``E_eff = s E``.  In the 1-D model every
  frequency scales as ``sqrt(E)`` when ``E`` changes with Poisson's ratio held: the
  shear modulus ``G = E / (2 (1 + nu))`` scales with it, so the stiffness matrix
  scales by ``s`` and the mass matrix does not, and every eigenvalue ``omega^2``
  scales by ``s`` (the generalized eigenproblem ``K u = omega^2 M u``);
* **per-partial factors** ``c_n``: what is left of each partial after ``E``.

Fit (least squares in log-frequency, one unknown ``a = ln sqrt(s)``)::

    x_n = ln(f_meas,n / f_model,n)          n = 1, 2, 3
    a   = mean(x_n)                          (minimises sum (x_n - a)^2)
    s   = exp(2 a)                           E_eff = E (f_meas / f_model)^2 for one partial
    c_n = exp(x_n - a) = f_meas,n / (f_model,n sqrt(s))

so the factors have geometric mean 1: a change common to all three partials is
stiffness by this convention, and the residual ``1200 (x_n - a) / ln 2`` cents is
what the modulus alone cannot explain.

Composition with the 3-D correction table
-----------------------------------------
``f_model,n`` is the frequency the preset predicts: the 1-D partial times the 3-D
factor of the preset's ``[solid_correction]`` table at that note
(:mod:`synth.physics.solid_correction`; 1 without a table).  The calibration
multiplies on top of it, so the predicted partial of any bar of the range is::

    f_n = f_1D,n(E) * k3D_n(note) * sqrt(s) * c_n

The 3-D factors vary along the range; ``s`` and ``c_n`` are taken as constant
over it (one alloy batch, one section family).

Uncertainty
-----------
Each measured frequency is taken as known to the record's resolution
``df = 1 / T`` over the analysed stretch ``T`` (a worst case, as for the offcut
moduli), so ``|d ln s| <= 2 mean(df_n / f_n)`` and ``|d ln c_n| <= df_n / f_n +
mean(df / f)``.

The file table (written by ``barwright measure --calibrate``)::

    [stiffness]
    youngs_modulus_scale = 1.02           # E_eff / E of the preset's material
    factors = [1.004, 0.995, 1.001]       # vertical 1-3, after E
    youngs_modulus_pa = 7.04e10           # E_eff at the material's reference temperature
    scale_uncertainty = 0.0004            # relative, from the frequency resolution
    note = "A4"
    recording = "a4-prototype.wav"
    model_hz = [...]                      # f_model,n (3-D corrected when the preset has a table)
    measured_hz = [...]
    tolerance_hz = [...]                  # df_n
    residual_cents = [...]                # 1200 log2 c_n

Only the first two keys change a model; the others record the measurement.

References
----------
.. [1] Bathe, K.-J., Finite Element Procedures, Prentice-Hall, 1996, ISBN
   0-13-301458-4, section 10.2 (the generalized eigenproblem ``K phi = lambda M
   phi``: scaling ``K`` scales every ``lambda``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from synth.errors import ModelError

N_PARTIALS = 3
"""Vertical partials the calibration fits (1-3)."""

SECTION = "stiffness"

STIFFNESS_KEYS = ("youngs_modulus_scale", "factors", "youngs_modulus_pa", "scale_uncertainty",
                  "note",
         "recording", "model_hz", "measured_hz", "tolerance_hz", "residual_cents")


@dataclass(frozen=True)
class StiffnessCalibration:
    """Effective modulus scale and per-partial factors, as a calibration file holds them.

    Attributes
    ----------
    youngs_scale : float
        ``E_eff / E`` of the preset's material.
    factors : tuple of float
        ``c_n`` of vertical partials 1-3 after the modulus.
    source : str
        Where they were read from.
    """

    youngs_scale: float
    factors: tuple[float, ...]
    source: str = ""

    def frequency_factors(self, n: int) -> tuple[float, ...]:
        """Return ``sqrt(s) c_k`` for vertical partials 1..n (``c_k = 1`` beyond 3)."""
        return tuple(self.mode_factor("vertical", k) for k in range(1, n + 1))

    def mode_factor(self, kind: str, order: int) -> float:
        """Return the frequency factor of one mode: ``sqrt(s) c_n``.

        ``c_n`` applies to vertical partials 1-3 only; every other mode (higher
        vertical ones, lateral, torsional) gets ``sqrt(s)``: a modulus scale at a
        fixed Poisson ratio scales the shear modulus too, so every elastic mode's
        eigenvalue scales by ``s`` (module docstring).
        """
        root = math.sqrt(self.youngs_scale)
        k = order - 1
        return root * (self.factors[k] if kind == "vertical" and 0 <= k < len(self.factors)
                       else 1.0)

    def to_dict(self) -> dict:
        """Plain values for JSON and sidecars."""
        return {"source": self.source, "youngs_modulus_scale": self.youngs_scale,
                "factors": list(self.factors)}

    def describe(self) -> str:
        """Say in a line what the calibration does."""
        return (f"stiffness calibrated from a prototype bar ({self.source}): E x "
                f"{self.youngs_scale:.5f}, vertical 1-3 x "
                + ", ".join(f"{c:.5f}" for c in self.factors))


@dataclass(frozen=True)
class StiffnessFit:
    """The modulus scale and per-partial factors fitted to one measured bar.

    Attributes
    ----------
    youngs_scale : float
        ``s = E_eff / E``.
    factors : tuple of float
        ``c_n``, geometric mean 1.
    model_hz, measured_hz, tolerance_hz : tuple of float
        ``f_model,n``, ``f_meas,n`` and ``df_n``, Hz.
    residual_cents : tuple of float
        ``1200 log2 c_n``: what the modulus alone leaves, cents.
    scale_uncertainty : float
        Worst-case relative uncertainty of ``s`` from ``df_n``.
    factor_uncertainty : tuple of float
        Worst-case relative uncertainty of each ``c_n``.
    """

    youngs_scale: float
    factors: tuple[float, ...]
    model_hz: tuple[float, ...]
    measured_hz: tuple[float, ...]
    tolerance_hz: tuple[float, ...]
    residual_cents: tuple[float, ...]
    scale_uncertainty: float
    factor_uncertainty: tuple[float, ...]

    @property
    def rms_residual_cents(self) -> float:
        """Root mean square of the residuals, cents."""
        return float(np.sqrt(np.mean(np.square(self.residual_cents))))

    def calibration(self, source: str = "") -> StiffnessCalibration:
        """Return the part a model uses."""
        return StiffnessCalibration(self.youngs_scale, self.factors, source)

    def to_dict(self) -> dict:
        """Plain values for JSON."""
        return {"youngs_modulus_scale": self.youngs_scale, "factors": list(self.factors),
                "model_hz": list(self.model_hz), "measured_hz": list(self.measured_hz),
                "tolerance_hz": list(self.tolerance_hz),
                "residual_cents": list(self.residual_cents),
                "rms_residual_cents": self.rms_residual_cents,
                "scale_uncertainty": self.scale_uncertainty,
                "factor_uncertainty": list(self.factor_uncertainty)}

    def as_written(self, source: str = "") -> StiffnessCalibration:
        """Return the calibration as a file written by :meth:`to_table` reads back."""
        return StiffnessCalibration(_sig(self.youngs_scale),
                                    tuple(_sig(c) for c in self.factors), source)

    def to_table(self, *, youngs_modulus_pa: float, note: str, recording: str) -> dict:
        """Return the ``[stiffness]`` table of a calibration file (see the module doc)."""
        sig = _sig
        written = self.as_written()
        return {"youngs_modulus_scale": written.youngs_scale,
                "factors": list(written.factors),
                "youngs_modulus_pa": sig(youngs_modulus_pa * self.youngs_scale),
                "scale_uncertainty": sig(self.scale_uncertainty),
                "note": note, "recording": recording,
                "model_hz": [sig(f) for f in self.model_hz],
                "measured_hz": [sig(f) for f in self.measured_hz],
                "tolerance_hz": [sig(f) for f in self.tolerance_hz],
                "residual_cents": [sig(c) for c in self.residual_cents]}


def _sig(v) -> float:
    """``v`` to the 9 significant digits a calibration file holds."""
    return float(f"{float(v):.9g}")


def fit_stiffness(model_hz, measured_hz, tolerance_hz) -> StiffnessFit:
    """Fit the modulus scale and per-partial factors (module docstring).

    Parameters
    ----------
    model_hz, measured_hz : sequence of float
        Model and measured frequencies of vertical partials 1..3, Hz (> 0).
    tolerance_hz : sequence of float
        Uncertainty of each measured frequency, Hz (>= 0).

    Returns
    -------
    StiffnessFit
    """
    fm = np.asarray(model_hz, dtype=float)
    fx = np.asarray(measured_hz, dtype=float)
    df = np.asarray(tolerance_hz, dtype=float)
    if fm.shape != (N_PARTIALS,) or fx.shape != fm.shape or df.shape != fm.shape:
        raise ModelError(f"the stiffness fit needs vertical partials 1-{N_PARTIALS}, model and "
                         "measured")
    if not (np.all(np.isfinite(fm)) and np.all(fm > 0) and np.all(np.isfinite(fx))
            and np.all(fx > 0) and np.all(df >= 0)):
        raise ModelError("the stiffness fit needs positive, finite frequencies")
    x = np.log(fx / fm)
    a = float(np.mean(x))
    r = x - a
    rel = df / fx
    return StiffnessFit(
        youngs_scale=math.exp(2.0 * a), factors=tuple(float(v) for v in np.exp(r)),
        model_hz=tuple(float(v) for v in fm), measured_hz=tuple(float(v) for v in fx),
        tolerance_hz=tuple(float(v) for v in df),
        residual_cents=tuple(float(v) for v in 1200.0 * r / math.log(2.0)),
        scale_uncertainty=float(2.0 * np.mean(rel)),
        factor_uncertainty=tuple(float(v) for v in rel + np.mean(rel)))
