"""A bootstrap particle filter for the `sv` model in JAX: the accuracy-per-second rival of EIS.

    x_1 ~ N(mu, sigma_eta^2 / (1 - phi^2)),   x_t = mu + phi (x_{t-1} - mu) + sigma_eta eta_t
    w_t^(i) = g_t(y_t | x_t^(i)) = N(y_t; 0, exp(x_t^(i)))
    log L_hat = sum_t log( mean_i w_t^(i) )

The particles are propagated through the state's own transition (the bootstrap proposal;
Gordon, Salmond and Smith 1993, IEE Proceedings F 140) and resampled every period by
systematic resampling (Kitagawa 1996, J. Comput. Graph. Statist. 5) with a single uniform.
The resampling is O(N): with ``cdf`` the normalised cumulative weights, the ancestor of the
j-th stratum point ``(u + j) / N`` is the number of particles with ``cdf_i <= (u + j) / N``;
each particle's count position ``ceil(N cdf_i - u)`` is scatter-added into a histogram whose
cumulative sum is the ancestor index (``method="scatter"``, the default; the cumulative sums use
``lax.associative_scan``). ``method="search"`` does the same with ``jnp.searchsorted``.

``lax.scan`` over time, vectorised over particles, JIT-compiled once per (T, N, method).
Run ``python experiments/particle_filter.py`` for a quick comparison with the grid filter.
"""

from __future__ import annotations

import functools
import math

import jax
import jax.numpy as jnp

import smle  # noqa: F401  (float64 mode and the compilation cache)

LOG_2PI = math.log(2.0 * math.pi)


def systematic_ancestors(weights: jax.Array, uniform: jax.Array, method: str = "scatter") -> jax.Array:
    """Ancestor indices of systematic resampling, shape (N,), from unnormalised weights (N,)."""
    n = weights.shape[0]
    # associative_scan: about 2x faster than jnp.cumsum for N ~ 1e5 on this CPU
    cdf = jax.lax.associative_scan(jnp.add, weights)
    cdf = cdf / cdf[-1]
    if method == "scatter":
        position = jnp.clip(jnp.ceil(n * cdf - uniform), 0, n).astype(jnp.int32)
        marks = jnp.zeros((n + 1,), jnp.int32).at[position].add(1)
        ancestors = jax.lax.associative_scan(jnp.add, marks[:n])
    elif method == "search":
        points = (uniform + jnp.arange(n, dtype=cdf.dtype)) / n
        ancestors = jnp.searchsorted(cdf, points, side="right")
    else:
        raise ValueError(f"method = {method!r}; accepted: 'scatter' or 'search'")
    return jnp.minimum(ancestors, n - 1)


def _log_obs(x, y_t):
    return -0.5 * (LOG_2PI + x + y_t * y_t * jnp.exp(-x))


def _weigh_and_resample(x, y_t, key, method):
    """Log mean weight of the period and the resampled particles."""
    log_w = _log_obs(x, y_t)
    top = jnp.max(log_w)
    weights = jnp.exp(log_w - top)
    increment = top + jnp.log(jnp.mean(weights))
    ancestors = systematic_ancestors(weights, jax.random.uniform(key, dtype=x.dtype), method)
    return x[ancestors], increment


@functools.lru_cache(maxsize=None)
def particle_filter(n_particles: int, method: str = "scatter"):
    """The JIT-compiled filter ``(params, y, key) -> log L_hat`` for ``n_particles`` particles.

    ``params`` maps mu, phi, sigma_eta to scalars; ``y`` has shape (T,); ``key`` is a PRNG key.
    """

    def run(params, y, key):
        mu, phi, sigma_eta = params["mu"], params["phi"], params["sigma_eta"]
        keys = jax.random.split(key, (y.shape[0], 2))
        init_sd = sigma_eta / jnp.sqrt(1.0 - phi * phi)
        first = mu + init_sd * jax.random.normal(keys[0, 0], (n_particles,), y.dtype)
        particles, loglik = _weigh_and_resample(first, y[0], keys[0, 1], method)

        def step(carry, inputs):
            previous, total = carry
            y_t, period_keys = inputs
            eta = jax.random.normal(period_keys[0], (n_particles,), y.dtype)
            current = mu + phi * (previous - mu) + sigma_eta * eta
            resampled, increment = _weigh_and_resample(current, y_t, period_keys[1], method)
            return (resampled, total + increment), None

        (_, loglik), _ = jax.lax.scan(step, (particles, loglik), (y[1:], keys[1:]))
        return loglik

    return jax.jit(run)


def loglik(params, y, n_particles: int, seed: int = 0, method: str = "scatter") -> float:
    """Bootstrap particle filter estimate of the `sv` log-likelihood (a Python float)."""
    params = {k: jnp.asarray(params[k], float) for k in ("mu", "phi", "sigma_eta")}
    return float(particle_filter(int(n_particles), method)(params, jnp.asarray(y, float),
                                                           jax.random.PRNGKey(seed)))


def main() -> None:
    import time

    import numpy as np

    from smle.reference import grid_loglik

    weights = jnp.exp(3.0 * jax.random.normal(jax.random.PRNGKey(7), (10_007,)))
    same = all(
        np.array_equal(systematic_ancestors(weights, u, "scatter"), systematic_ancestors(weights, u, "search"))
        for u in (0.0, 0.31, 0.999)
    )
    print(f"scatter-add and searchsorted ancestors identical: {same}")
    design = {"mu": -7.36, "phi": 0.95, "sigma_eta": 0.26}
    y, _ = smle.simulate("sv", design, 1000, seed=0)
    print(f"T=1000, grid filter (n_grid=1000): {grid_loglik('sv', design, y, n_grid=1000):.4f}")
    for method, sizes in (("scatter", (1_000, 10_000, 50_000)), ("search", (1_000, 10_000))):
        for n in sizes:
            loglik(design, y, n, seed=0, method=method)  # compile
            start = time.perf_counter()
            values = [loglik(design, y, n, seed=s, method=method) for s in range(1, 4)]
            seconds = (time.perf_counter() - start) / 3
            print(f"{method:8s} N={n:7d}: {', '.join(f'{v:.4f}' for v in values)}  {seconds:.3f} s/eval")


if __name__ == "__main__":
    main()
