"""lidmelt: mantle potential temperature and lithosphere thickness from melting observations.

The everyday API is re-exported here; the two layers sit beneath it:

- `lidmelt.forward`: adiabatic decompression melting of peridotite beneath a lid
  (`melt_column`);
- `lidmelt.inversion`: study files, priors, likelihoods and the emcee inversion (`Study`,
  `fit`), and the comparison of competing scenarios by evidence and PSIS-LOO (`compare`).

Results are scientific estimates that depend on the chosen melting parameterization and the
other modelling assumptions (see ``docs/model.md``); they are no basis on their own for
hazard or resource decisions.

Examples
--------
>>> import lidmelt
>>> column = lidmelt.melt_column(1350.0, 0.0)
>>> round(float(column.onset_depth), 1)
82.2
"""

from importlib import metadata as _metadata

from .forward import MeltColumn, melt_column
from .inversion import InputError, Posterior, Study, fit


def __getattr__(name):
    # `compare` loads the comparison subpackage on first use (import lidmelt stays light)
    if name in ("compare", "Comparison"):
        from . import inversion

        return getattr(inversion, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


try:
    __version__ = _metadata.version("lidmelt")
except _metadata.PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0+unknown"

__all__ = ["Comparison", "InputError", "MeltColumn", "Posterior", "Study", "__version__",
           "compare", "fit", "melt_column"]
