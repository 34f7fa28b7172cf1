"""Process-wide JAX settings that smle relies on.

smle computes in float64 throughout: the exact Gaussian case of EIS is off by about 5e-3 in
float32, far above the Monte Carlo error the engine reports. Importing smle therefore turns on
JAX's 64-bit mode for the whole process.

Compiled kernels are kept in JAX's persistent compilation cache, in a user cache folder
(``$SMLE_CACHE_DIR``, else ``$XDG_CACHE_HOME/smle/jax``, else ``~/.cache/smle/jax``). On CPU the
cache only stores programs when its minimum compile time is 0, so we set that. Set
``SMLE_COMPILATION_CACHE=0`` to leave JAX's cache settings alone.
"""

from __future__ import annotations

import os
from pathlib import Path

import jax


def cache_dir() -> Path:
    """The folder of smle's persistent compilation cache."""
    explicit = os.environ.get("SMLE_CACHE_DIR")
    if explicit:
        return Path(explicit)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(Path.home(), ".cache")
    return Path(base) / "smle" / "jax"


def configure() -> None:
    """Enable float64 and the persistent compilation cache (idempotent)."""
    jax.config.update("jax_enable_x64", True)
    if os.environ.get("SMLE_COMPILATION_CACHE", "1") == "0":
        return
    folder = cache_dir()
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return  # a read-only home: run without the cache rather than fail
    jax.config.update("jax_compilation_cache_dir", str(folder))
    jax.config.update("jax_persistent_cache_min_compile_time_secs", 0.0)
    jax.config.update("jax_persistent_cache_min_entry_size_bytes", 0)
