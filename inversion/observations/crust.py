"""Kind ``crustal_thickness``: seismic thickness of igneous crust at sites.

Table columns: ``site`` (name), ``thickness_km`` (>= 0) and ``sigma_km`` (> 0, 1 sigma).
Each row is compared with the model's igneous crustal thickness (mass balance,
h_c = h rho_mantle / rho_crust; SCIENCE.md section 5, common practice) or, with
``compare_to = "melt_thickness"``, with the melt thickness h itself (as many papers do).

log L = sum_rows log N(obs_i; model, sigma_i^2 + model_error^2)

Where the model makes no melt it predicts zero thickness, and that Gaussian is kept (it
is the honest likelihood of "no crust"); rows with a positive observed thickness also get
the sloping no-melt penalty of `inversion.observations.base` (no constant offset, so the
likelihood is continuous at the melting boundary).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from .._errors import InputError, suggest
from .base import (
    NO_MELT_SLOPE,
    ObservationSet,
    gaussian_logpdf,
    melting_distance,
    require_single,
)
from .tables import ColumnRule

__all__ = ["COMPARE_TO", "CrustalThickness"]

#: Model quantities a crustal thickness can be compared with.
COMPARE_TO = ("crustal_thickness", "melt_thickness")


class CrustalThickness(ObservationSet):
    """Igneous crustal thickness observations (km).

    Parameters
    ----------
    data : pandas.DataFrame
        Columns ``site``, ``thickness_km``, ``sigma_km`` (validated).
    file : path-like, optional
    model_error : float
        km, added to sigma in quadrature.
    lines : sequence of int, optional
    compare_to : {"crustal_thickness", "melt_thickness"}
        Model quantity compared with the data.
    """

    kind = "crustal_thickness"
    quantity = "igneous crustal thickness"
    unit = "km"
    id_column = "site"
    value_column = "thickness_km"
    sigma_column = "sigma_km"
    option_keys = ("compare_to",)

    def __init__(self, data, *, file=None, model_error=0.0, lines=None,
                 compare_to: str = "crustal_thickness") -> None:
        super().__init__(data, file=file, model_error=model_error, lines=lines)
        if compare_to not in COMPARE_TO:
            raise InputError(f"unknown compare_to {compare_to!r}"
                             + suggest(str(compare_to), COMPARE_TO), key="compare_to")
        self.compare_to = compare_to

    @classmethod
    def column_rules(cls, **options):
        return [
            ColumnRule("site", numeric=False),
            ColumnRule("thickness_km", low=0.0, unit="km",
                       why="a thickness cannot be negative"),
            ColumnRule("sigma_km", low=0.0, low_open=True, unit="km",
                       why="a 1-sigma uncertainty must be positive"),
        ], []

    @classmethod
    def _parse_options(cls, spec: Mapping, where: str) -> dict:
        compare_to = spec.get("compare_to", "crustal_thickness")
        if compare_to not in COMPARE_TO:
            raise InputError(f"unknown value {compare_to!r}" + suggest(str(compare_to),
                             COMPARE_TO), key=f"{where}.compare_to")
        return {"compare_to": compare_to}

    def _model(self, column) -> np.ndarray:
        return np.asarray(getattr(column, self.compare_to), float)

    def log_likelihood(self, column, *, parameters: Mapping | None = None) -> np.ndarray:
        model = self._model(column)[..., None]  # (n, 1) against rows (rows,)
        per_row = gaussian_logpdf(self.values, model, self.sigma)
        total = per_row.sum(axis=-1)
        melt_rows = np.count_nonzero(self.values > 0.0)
        distance = melting_distance(column, parameters)
        return total - melt_rows * NO_MELT_SLOPE * distance

    def predict(self, column) -> dict[str, np.ndarray]:
        model = self._model(column)[..., None]
        return {"value": np.broadcast_to(model, model.shape[:-1] + (len(self),)).copy()}

    def simulate(self, column, rng: np.random.Generator) -> CrustalThickness:
        require_single(column, "simulate")
        model = float(np.ravel(self._model(column))[0])
        draws = model + self.sigma * rng.standard_normal(len(self))
        return self._replace_values({self.value_column: draws}, compare_to=self.compare_to)

    def describe(self) -> str:
        return (f"{len(self)} crustal thickness value(s) from {self.name}, compared with the "
                f"model {self.compare_to.replace('_', ' ')}"
                + (f" (model error {self.model_error:g} km)" if self.model_error else ""))
