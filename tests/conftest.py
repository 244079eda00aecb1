"""Shared fixtures: seeded random numbers, one BLAS thread, one command tree and one build sheet."""

from __future__ import annotations

import numpy as np
import pytest
from threadpoolctl import threadpool_limits


@pytest.fixture(scope="session", autouse=True)
def _one_blas_thread():
    """Hold BLAS/OpenMP pools to one thread while the tests run.

    The eigenproblems here are small (a few hundred DOF): with two threads on a shared
    machine the same call has taken seconds instead of milliseconds (design outline,
    performance facts).  One thread also makes rounding repeatable between runs.
    """
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="session", autouse=True)
def _plan_cache_in_tmp(tmp_path_factory):
    """Keep the voice-plan cache of the test run in a temporary folder, never the user's."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("BARWRIGHT_CACHE", str(tmp_path_factory.mktemp("plan-cache")))
        yield


@pytest.fixture(scope="session", autouse=True)
def _command_tree_built_once():
    """Build the ``barwright`` command tree once for every ``CliRunner`` run of the session.

    typer converts the app into click commands on each ``CliRunner.invoke`` (20-50 ms,
    more as command modules are imported; half of a bad-input property run's time);
    the tree is the same each time, and its lazy table still imports a command's
    module on first use.  A test may build its own (test_option_properties.py).
    """
    import typer.main
    import typer.testing

    from synth.cli import app

    built = typer.main.get_command(app)

    def command(typer_app):
        return built if typer_app is app else typer.main.get_command(typer_app)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(typer.testing, "_get_command", command, raising=False)
        yield


@pytest.fixture(scope="session")
def demo_cutlist(tmp_path_factory):
    """One ``barwright cutlist`` of the demo preset with ``--json``: (result, folder).

    The build sheet solves all 37 bars; the end-to-end sheet checks, the demo's
    sheet, the strict-JSON check and the trust marks read this one run.
    """
    from typer.testing import CliRunner

    from synth.cli import app
    from synth.config import presets_dir

    folder = tmp_path_factory.mktemp("demo-cutlist")
    preset = presets_dir() / "instruments" / "lantern-street-bars.toml"
    result = CliRunner().invoke(app, ["cutlist", str(preset), "--out", str(folder), "--json"])
    return result, folder


@pytest.fixture
def rng() -> np.random.Generator:
    """Return a generator with a fixed seed so noisy checks are repeatable."""
    return np.random.default_rng(20261202)


def _fe_rounding(bar, material, mesh, kind: str, freqs) -> np.ndarray:
    """Relative error rounding may put on FE frequencies ``freqs`` of one field.

    A symmetric eigensolver is backward stable, each eigenvalue within about
    eps lambda_max of an exact one (LAPACK Users' Guide, 3rd ed., section 4.7, error
    bounds for the symmetric eigenproblem, with its factor p(n) = 1; from memory):
    |df / f| <= eps (f_max / f)**2 / 2, f_max the mesh's highest frequency of the
    field.  Measured on the bar model: rigid-body eigenvalues at 0.03 to 0.7
    eps lambda_max on 8 to 256 elements.
    """
    from synth.physics.bar_fe import dense_reference_frequencies

    f_max = dense_reference_frequencies(bar, material, mesh)[kind][-1]
    return np.finfo(float).eps * (f_max / np.asarray(freqs)) ** 2 / 2


@pytest.fixture(scope="session")
def fe_rounding():
    """The rounding bound of bar-model frequencies (see _fe_rounding)."""
    return _fe_rounding
