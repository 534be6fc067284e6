"""lidmelt: mantle potential temperature and lithosphere thickness from melting observations.

The everyday API is re-exported here; the two layers sit beneath it:

- `lidmelt.forward`: adiabatic decompression melting of peridotite beneath a lid
  (`melt_column`);
- `lidmelt.inversion`: study files, priors, likelihoods and the emcee inversion (`Study`,
  `fit`), surveys of many sites (`survey`) and the comparison of competing scenarios by
  evidence and PSIS-LOO (`compare`), both imported on first use.

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

from ._lazy import lazy_exports

# Imported on first use, so `import lidmelt` does not load the sampler or plotting stack.
_getattr, __dir__ = lazy_exports(__name__, globals(), {
    "MeltColumn": ".forward", "melt_column": ".forward",
    "InputError": ".inversion", "Posterior": ".inversion", "Study": ".inversion",
    "fit": ".inversion", "survey": ".inversion.survey",
    "compare": ".inversion.comparison", "Comparison": ".inversion.comparison",
})


def _installed_version() -> str:
    """The installed version of lidmelt (``"0+unknown"`` in an uninstalled source tree)."""
    from importlib import metadata  # about 30 ms: only when asked

    try:
        return metadata.version("lidmelt")
    except metadata.PackageNotFoundError:
        return "0+unknown"


def __getattr__(name: str):
    if name == "__version__":
        return _installed_version()
    return _getattr(name)


__all__ = ["Comparison", "InputError", "MeltColumn", "Posterior", "Study", "__version__",
           "compare", "fit", "melt_column", "survey"]

