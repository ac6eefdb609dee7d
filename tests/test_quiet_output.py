"""Third-party advice stays out of the user's output unless the user must act on it.

PyTensor warns, once per process, when it finds no system BLAS, with advice on other
installers; bayeszi's models do not depend on BLAS speed (elementwise densities), so that
advice is filtered in ``bayeszi/model/__init__.py``. Each check runs in a fresh process,
because the warning is issued once per process.
"""

from __future__ import annotations

import subprocess
import sys

PROBE = "import pytensor; print(repr(pytensor.config.blas__ldflags))"


def _run(code: str) -> tuple[str, str]:
    done = subprocess.run([sys.executable, "-W", "default", "-c", code],
                          capture_output=True, text=True, timeout=300, check=True)
    return done.stdout.strip(), done.stderr


def test_blas_advice_is_not_shown_after_importing_bayeszi() -> None:
    ldflags, without = _run(PROBE)
    _, with_ = _run("import bayeszi.model; " + PROBE)
    assert "BLAS" not in with_ and "conda" not in with_, with_
    if ldflags == "''":  # no system BLAS here: PyTensor does warn when bayeszi is not loaded
        assert "could not link to a BLAS" in without, without


ONE_CHAIN = ("import numpy as np, arviz as az; "
             "az.rhat(np.random.default_rng(1).normal(size=(1, 200)))")


def test_arviz_one_chain_note_is_not_shown_after_importing_bayeszi() -> None:
    """One chain: ArviZ logs "Shape validation failed" to standard error; bayeszi says what
    one chain means in its own warning, so the note is dropped once bayeszi.model is loaded.
    The probe shows ArviZ does log it without bayeszi (else this test could not fail)."""
    _, without = _run(ONE_CHAIN)
    _, with_ = _run("import bayeszi.model; " + ONE_CHAIN)
    assert "Shape validation failed" in without, without
    assert "Shape validation failed" not in with_, with_
