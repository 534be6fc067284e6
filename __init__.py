"""lidmelt: mantle potential temperature and lithosphere thickness from melting observations.

The everyday API is re-exported here; the two layers sit beneath it:

- `lidmelt.forward`: adiabatic decompression melting of peridotite beneath a lid
  (`melt_column`);
- `lidmelt.inversion`: study files, priors, likelihoods and the emcee inversion (`Study`,
  `fit`), and surveys of many sites (`survey`, imported on first use).

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

try:
    __version__ = _metadata.version("lidmelt")
except _metadata.PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0+unknown"

__all__ = ["InputError", "MeltColumn", "Posterior", "Study", "__version__", "fit",
           "melt_column", "survey"]


def __getattr__(name: str):
    # `survey` pulls in the executors and job machinery: load it only when asked for
    if name == "survey":
        from .inversion.survey import survey

        return survey
    raise AttributeError(f"module 'lidmelt' has no attribute {name!r}")
