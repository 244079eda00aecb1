"""The compiled contact loop against the numpy reference loop of the physics layer.

Independent path: :func:`synth.physics.mallet._run_steps`, the loop written in
numpy (itself checked against closed forms in test_mallet_contact.py), with the
same RK4 step, event rules and root finding.
"""

from __future__ import annotations

import numpy as np
import pytest

from synth.engine.contact import run_contact
from synth.physics.mallet import simulate_contact
from synth.settings.mallet import load_mallet

EPS = np.finfo(float).eps
FIELDS = ("amplitude_m", "phase_rad", "force_n", "time_s", "modal_displacement_m",
          "modal_velocity_m_s")
SCALARS = ("contact_time_s", "impulse_n_s", "max_compression_m", "bar_energy_j",
           "contact_loss_j", "bar_damping_loss_j", "rebound_velocity_m_s")


def _modes(seed: int, n: int):
    rng = np.random.default_rng(seed)
    return dict(omega_rad_s=np.sort(rng.uniform(2 * np.pi * 200, 2 * np.pi * 8000, n)),
                modal_mass_kg=rng.uniform(0.02, 0.1, n), shape_value=rng.uniform(-1, 1, n),
                decay_per_s=rng.uniform(0.1, 5.0, n))


@pytest.mark.parametrize(("mallet", "speed", "n_modes", "seed"), [
    ("very-soft", 0.3, 7, 1), ("soft", 0.5, 5, 2), ("medium", 1.0, 7, 3),
    ("hard", 3.0, 7, 4), ("very-hard", 2.0, 3, 5), ("medium", 1.0, 1, 6),
])
def test_compiled_loop_matches_the_reference(mallet: str, speed: float, n_modes: int,
                                             seed: int) -> None:
    """Same pulse, contacts and free vibration to rounding.

    Tolerance: each RK4 step rounds about (n_modes + 5) sums and products, and the
    loop is stable (the errors do not grow), so after N steps the two loops differ
    by at most N (n_modes + 5) eps relative to each quantity's scale (Higham 2002,
    Accuracy and Stability of Numerical Algorithms, ch. 3, for the sums).
    """
    head = load_mallet(mallet)
    ref = simulate_contact(head, speed, **_modes(seed, n_modes))
    fast = simulate_contact(head, speed, **_modes(seed, n_modes), runner=run_contact)
    assert fast.n_contacts == ref.n_contacts
    assert fast.time_s.size == ref.time_s.size
    tol = ref.time_s.size * (n_modes + 5) * EPS
    for name in FIELDS:
        a, b = getattr(ref, name), getattr(fast, name)
        scale = np.max(np.abs(a))
        assert np.max(np.abs(a - b)) <= tol * scale, name
    for name in SCALARS:
        a, b = getattr(ref, name), getattr(fast, name)
        assert abs(a - b) <= tol * max(abs(a), 1e-300), name


def test_runner_checks_its_arrays() -> None:
    """A caller that passes arrays of the wrong shape gets an error, not a crash."""
    s = np.zeros(5 + 2 * 3)
    with pytest.raises(ValueError, match="modal must have 8 rows"):
        run_contact(s, s.copy(), np.zeros((5, s.size)), np.zeros(10),
                    np.zeros(5, dtype=np.int64), np.zeros(1), 1e-6, 10, np.ones(4),
                    np.zeros((7, 3)))
