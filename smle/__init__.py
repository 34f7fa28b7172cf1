"""smle: simulated maximum likelihood for latent-factor volatility models.

Importing smle enables JAX's 64-bit mode for the process (all computation is float64) and
its persistent compilation cache in a user cache folder; see :mod:`smle._config`.
"""

from smle import _config

_config.configure()

__version__ = "0.1.0"
