"""Process-wide JAX settings that smle relies on.

smle computes in float64 throughout: the exact Gaussian case of EIS is off by about 5e-3 in
float32, far above the Monte Carlo error the engine reports. Importing smle therefore turns on
JAX's 64-bit mode for the whole process.

Compiled kernels are kept in JAX's persistent compilation cache, in a user cache folder
(``$SMLE_CACHE_DIR``, else ``$XDG_CACHE_HOME/smle/jax``, else ``~/.cache/smle/jax``). On CPU the
cache only stores programs when its minimum compile time is 0, so we set that. Set
``SMLE_COMPILATION_CACHE=0`` to leave JAX's cache settings alone.

Importing JAX takes one to two seconds, so ``import smle`` does not: :func:`configure` sets
the settings in JAX's own environment variables (``JAX_ENABLE_X64`` and the cache's), which
JAX reads when it is first imported, by whichever smle module needs it first. When JAX is
already imported, it updates ``jax.config`` directly.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path


def cache_dir() -> Path:
    """The folder of smle's persistent compilation cache."""
    explicit = os.environ.get("SMLE_CACHE_DIR")
    if explicit:
        return Path(explicit)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(Path.home(), ".cache")
    return Path(base) / "smle" / "jax"


def settings() -> dict[str, object]:
    """The JAX settings smle needs, by ``jax.config`` name."""
    out: dict[str, object] = {"jax_enable_x64": True}
    if os.environ.get("SMLE_COMPILATION_CACHE", "1") == "0":
        return out
    folder = cache_dir()
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return out  # a read-only home: run without the cache rather than fail
    out["jax_compilation_cache_dir"] = str(folder)
    out["jax_persistent_cache_min_compile_time_secs"] = 0.0
    out["jax_persistent_cache_min_entry_size_bytes"] = 0
    return out


def configure() -> None:
    """Enable float64 and the persistent compilation cache (idempotent; does not import JAX)."""
    values = settings()
    jax = sys.modules.get("jax")
    if jax is not None and hasattr(jax, "config"):
        for name, value in values.items():
            jax.config.update(name, value)
        return
    for name, value in values.items():
        # JAX reads its settings from these variables when it is imported (jax 0.4 and later).
        os.environ[name.upper()] = "1" if value is True else str(value)


def _timings_path() -> Path:
    return cache_dir() / "compile_seconds.json"


def compile_seconds(what: str) -> float | None:
    """Seconds the last first evaluation of ``what`` took (compilation included), if recorded."""
    try:
        return float(json.loads(_timings_path().read_text())[what])
    except (OSError, ValueError, KeyError, TypeError):
        return None


def remember_compile_seconds(what: str, seconds: float) -> None:
    """Record how long a first evaluation of ``what`` took, for the next announcement."""
    try:
        path = _timings_path()
        known = json.loads(path.read_text()) if path.exists() else {}
        known[what] = round(float(seconds), 1)
        # written whole, then renamed: processes compiling side by side (parallel test workers,
        # study workers) never read a half-written file
        partial = path.with_name(f"{path.name}.{os.getpid()}.tmp")
        partial.write_text(json.dumps(known, indent=1))
        os.replace(partial, path)
    except (OSError, ValueError, TypeError):
        pass  # a read-only or damaged cache folder: the next announcement says 10-20 s
