"""Kind ``crustal_thickness``: seismic thickness of igneous crust at sites.

Table columns: ``site`` (name), ``thickness_km`` (0-60 km) and ``thickness_sigma_km``
(> 0, 1 sigma); remarks in columns starting with ``note``.
Each row is compared with the model's igneous crustal thickness (mass balance,
h_c = h rho_mantle / rho_crust; docs/model.md, "Observables"; common practice) or, with
``thickness_of = "melt"``, with the melt thickness h itself (as many papers do).

log L = sum_rows log N(obs_i; model, sigma_i^2 + model_error^2)

Where the model makes no melt it predicts zero thickness, and that Gaussian is kept (it
is the honest likelihood of "no crust"); rows with a positive observed thickness also get
the sloping no-melt penalty of `inversion.observations.base` (no constant offset, so the
likelihood is continuous at the melting boundary).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ...forward.quantities import quantity
from ..errors import InputError, suggest
from .base import (
    NO_MELT_SLOPE,
    ObservationSet,
    Panel,
    describe_errors,
    gaussian_logpdf,
    melting_distance,
    require_single,
)
from .tables import ColumnRule

__all__ = ["MAX_THICKNESS", "READING_SHIFT", "THICKNESS_OF", "CrustalThickness",
           "thickness_reading"]

#: km; largest observed thickness a table may hold. Igneous crust reaches about 40 km
#: beneath Iceland and the Ontong Java plateau (common practice, value from memory).
MAX_THICKNESS = 60.0

#: ``thickness_of`` choice -> the model quantity a crustal thickness is compared with.
THICKNESS_OF = {"crust": "crustal_thickness", "melt": "melt_thickness"}

#: Tp of the "melt" reading minus that of the "crust" reading (density ratio 3300/2900)
#: for observed thicknesses of 7 and 35 km, degC (Katz et al. 2003 dry, 1-D column, no
#: lid; computed with lidmelt, docs/model.md "Observables").
READING_SHIFT = (13, 28)


def thickness_reading(thickness_of: str, crust_density: float,
                      mantle_density: float) -> str:
    """One sentence: what the crustal thickness data were compared with, and the other
    reading.

    Igneous crust h_c = h * rho_mantle / rho_crust (mass balance, docs/model.md); much
    of the literature compares the melt thickness h itself with seismic crust. The two
    readings differ in Tp by about `READING_SHIFT`.

    Parameters
    ----------
    thickness_of : {"crust", "melt"}
    crust_density, mantle_density : float
        kg/m^3.
    """
    ratio = mantle_density / crust_density
    if thickness_of == "crust":
        head = (f"Crustal thickness data were fitted with the igneous crust made from the "
                f"melt, crust = melt × ρ_mantle/ρ_crust = melt × {ratio:.3f} "
                f"({mantle_density:g}/{crust_density:g} kg/m³; "
                f"{100 * (ratio - 1):.0f} % thicker than the melt).")
        other = ('Comparing the melt thickness itself with the crust '
                 '(`thickness_of = "melt"`, as much of the literature does) needs more '
                 'melt, so a hotter mantle')
    else:
        head = ("Crustal thickness data were fitted with the melt thickness itself "
                '(`thickness_of = "melt"`), not converted by density.')
        other = (f"Fitting the igneous crust, melt × {ratio:.3f} "
                 f"({mantle_density:g}/{crust_density:g} kg/m³; "
                 '`thickness_of = "crust"`), needs less melt, so a cooler mantle')
    low, high = READING_SHIFT
    return (f"{head} {other}: Tp differs by about {low} to {high} °C for 7 to 35 km of "
            "crust (docs/model.md, Observables).")


class CrustalThickness(ObservationSet):
    """Igneous crustal thickness observations (km).

    Parameters
    ----------
    data : pandas.DataFrame
        Columns ``site``, ``thickness_km``, ``thickness_sigma_km`` (validated).
    file : path-like, optional
    model_error : float or Prior
        km, added to sigma in quadrature (a `Prior`: free, sampled with the parameters).
    lines : sequence of int, optional
    thickness_of : {"crust", "melt"}
        Compare the data with the igneous crust thickness (default) or the melt thickness.
    """

    kind = "crustal_thickness"
    quantity = "igneous crustal thickness"
    unit = "km"
    id_column = "site"
    value_column = "thickness_km"
    sigma_column = "thickness_sigma_km"
    option_keys = ("thickness_of",)

    def __init__(self, data, *, file=None, model_error=0.0, lines=None,
                 thickness_of: str = "crust") -> None:
        super().__init__(data, file=file, model_error=model_error, lines=lines)
        if thickness_of not in THICKNESS_OF:
            raise InputError(f"unknown thickness_of {thickness_of!r}"
                             + suggest(str(thickness_of), THICKNESS_OF), key="thickness_of")
        self.thickness_of = thickness_of

    @classmethod
    def column_rules(cls, **options):
        return [
            ColumnRule("site", numeric=False),
            ColumnRule("thickness_km", low=0.0, high=MAX_THICKNESS, unit="km",
                       why="a thickness cannot be negative, and the thickest igneous "
                       "crust, beneath Iceland and oceanic plateaus, is about 40 km"),
            ColumnRule("thickness_sigma_km", low=1e-3, unit="km",
                       why="a 1-sigma uncertainty below 1 m is no measurement error (and "
                       "would make every likelihood underflow)"),
        ], []

    @classmethod
    def _parse_options(cls, spec: Mapping, where: str) -> dict:
        thickness_of = spec.get("thickness_of", "crust")
        if thickness_of not in THICKNESS_OF:
            raise InputError(f"unknown value {thickness_of!r}" + suggest(str(thickness_of),
                             THICKNESS_OF), key=f"{where}.thickness_of")
        return {"thickness_of": thickness_of}

    def _model(self, column) -> np.ndarray:
        return np.asarray(getattr(column, THICKNESS_OF[self.thickness_of]), float)

    def pointwise_log_likelihood(self, column, *, parameters: Mapping | None = None,
                                 errors: Mapping | None = None) -> np.ndarray:
        model = self._model(column)[..., None]  # (n, 1) against rows (rows,)
        per_row = gaussian_logpdf(self.values, model, self.total_sigma(errors))
        records_melt = self.values > 0.0  # only these rows are penalised for no melt
        distance = melting_distance(column, parameters)[..., None]
        return per_row - np.where(records_melt, NO_MELT_SLOPE * distance, 0.0)

    def predict(self, column) -> dict[str, np.ndarray]:
        model = self._model(column)[..., None]
        return {"value": np.broadcast_to(model, model.shape[:-1] + (len(self),)).copy()}

    def simulate(self, column, rng: np.random.Generator, *,
                 errors: Mapping | None = None) -> CrustalThickness:
        require_single(column, "simulate")
        model = float(np.ravel(self._model(column))[0])
        sigma = np.reshape(self.total_sigma(errors), len(self))  # errors: scalar or (1,)
        draws = model + sigma * rng.standard_normal(len(self))
        return self._replace_values({self.value_column: draws}, thickness_of=self.thickness_of)

    def panels(self) -> tuple[Panel, ...]:
        """One panel: the observed thickness against the model quantity it is compared
        with (`thickness_of`)."""
        model = quantity(THICKNESS_OF[self.thickness_of])
        return (Panel("value", "sigma", label=model.axis_label(),
                      title=f"thickness against the model {model.name}",
                      model=f"model {model.name}", unit=self.unit),)

    def describe(self) -> str:
        rows = "1 crustal thickness" if len(self) == 1 else f"{len(self)} crustal thicknesses"
        return (f"{rows} from {self.name}, compared with the "
                f"model {self.thickness_of} thickness"
                + describe_errors(self, {"model_error": "km"}))
