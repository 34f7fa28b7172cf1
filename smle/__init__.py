"""smle: simulated maximum likelihood for latent-factor volatility models.

Importing smle enables JAX's 64-bit mode for the process (all computation is float64) and
its persistent compilation cache in a user cache folder; see :mod:`smle._config`.
"""

from smle import _config

_config.configure()

from smle.errors import SmleInputError  # noqa: E402
from smle.likelihood import LoglikResult, loglik, simulate  # noqa: E402
from smle.fit import fit  # noqa: E402
from smle.results import FitResult  # noqa: E402
from smle.models import Model, get_model, model_names, register  # noqa: E402
from smle.diagnostics.filtering import FilterResult, filter_factor  # noqa: E402
from smle.diagnostics.gof import Diagnostics, diagnose  # noqa: E402
from smle import reference  # noqa: E402
from smle.diagnostics.health import HealthReport, check  # noqa: E402
from smle.decision.compare import Comparison, compare  # noqa: E402

__version__ = "0.1.0"

__all__ = [
    "Comparison",
    "Diagnostics",
    "FilterResult",
    "FitResult",
    "HealthReport",
    "check",
    "compare",
    "diagnose",
    "filter_factor",
    "fit",
    "LoglikResult",
    "Model",
    "SmleInputError",
    "get_model",
    "loglik",
    "model_names",
    "reference",
    "register",
    "simulate",
]
