"""The one table of quantities: key, unit, labels, prose name and number format.

Every layer reads units, labels and formats from here: the domain checks, the
``lidmelt column`` table, the summary tables, the report and the figures. A key is the
same word everywhere (the ``melt_column`` argument or attribute, the study-file key, the
CLI flag with dashes, the CSV column).

Keys built from a prefix and a known suffix, such as ``"crust.model_error"`` (the model
error of one observation block), are described by the suffix's entry with the prefix put
into the name (`quantity`).

Examples
--------
>>> from lidmelt.forward.quantities import quantity
>>> q = quantity("potential_temperature")
>>> q.unit, q.unit_text, q.format(1351.27)
('degC', '°C', '1351')
>>> q.axis_label(), q.column
('Mantle potential temperature (°C)', 'potential_temperature_c')
>>> quantity("crust.model_error", unit="km").name
'model error of crust'

Numbers for people (report, figures, terminal) are signed and given as percentages by
`format_signed` and `format_percent` only, so the three never differ.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

__all__ = ["GROUPS", "MINUS", "QUANTITIES", "Quantity", "format_percent", "format_signed",
           "quantity", "unit_text"]

#: The minus sign of every number shown to people (U+2212, as wide as "+").
MINUS = "\N{MINUS SIGN}"

#: Plain units (as in files and messages) -> how people write them.
_UNIT_TEXT = {"degC": "°C", "kg/m^3": "kg/m³", "-": ""}


def format_signed(value: float | None, decimals: int | None = None, *, plus: bool = False,
                  missing: str = "\N{EN DASH}") -> str:
    """A number for people: fixed `decimals` (None: shortest, ``:g``) and a true minus.

    A value that rounds to zero has no sign ("0.0", never "−0.0"); `plus` writes "+"
    before positive values (residuals, differences); None or NaN gives `missing`.

    Examples
    --------
    >>> format_signed(-1.25, 1), format_signed(-0.04, 1), format_signed(2.0, 1, plus=True)
    ('−1.2', '0.0', '+2.0')
    >>> format_signed(-2.5e-05), format_signed(float("nan"))
    ('−2.5e−05', '–')
    """
    if value is None or math.isnan(value):
        return missing
    text = f"{float(value):g}" if decimals is None else f"{float(value):.{decimals}f}"
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]
    if plus and not text.startswith("-") and float(text) != 0.0:
        text = "+" + text
    return text.replace("-", MINUS)


def format_percent(share: float, decimals: int = 1) -> str:
    """A share in 0-1 as a percentage for people, with a space before "%".

    A share that would show as 0 or 100 at `decimals` is given as a bound ("< 0.1 %",
    "> 99.9 %"), so a probability is never shown as certain.

    Examples
    --------
    >>> format_percent(0.25), format_percent(0.9996), format_percent(0.0004)
    ('25.0 %', '> 99.9 %', '< 0.1 %')
    >>> format_percent(0.9994), format_percent(0.05, 0)
    ('99.9 %', '5 %')
    """
    step = 10.0 ** -decimals
    value = round(100.0 * float(share), decimals)
    if value <= 0.0:
        return f"< {step:.{decimals}f} %"
    if value >= 100.0:
        return f"> {100.0 - step:.{decimals}f} %"
    return f"{value:.{decimals}f} %"
#: Plain units -> the suffix of a table column (``<quantity>_<unit>``, the rule of the
#: observation tables: ``thickness_km``, ``pressure_gpa``, ``temperature_c``).
_UNIT_SUFFIX = {"degC": "c", "km": "km", "GPa": "gpa", "ppm": "ppm", "kg/m^3": "kg_m3",
                "cn": "cn"}


def unit_text(unit: str) -> str:
    """Printable form of a plain unit (``"degC"`` -> ``"°C"``, ``"-"`` -> ``""``)."""
    return _UNIT_TEXT.get(unit, unit)


@dataclass(frozen=True)
class Quantity:
    """How one quantity is named, labelled and printed.

    Attributes
    ----------
    key : str
        Identifier (argument, attribute, study-file key, CSV column).
    unit : str
        Plain unit as written in files and messages (``"degC"``, ``"km"``, ``"-"`` for
        dimensionless).
    short : str
        A few characters for table headers and tight axes (``"Tp"``).
    name : str
        Prose name, lower case, for sentences and legends.
    decimals : int
        Decimals shown in tables for people (machine formats keep full precision).
    group : str
        Which question the quantity answers (a key of `GROUPS`).
    math : str
        Label in matplotlib mathtext (defaults to `short`).
    significant : int
        When > 0, tables show this many significant digits instead of `decimals` (for
        values spanning decades, such as concentrations in ppm).
    """

    key: str
    unit: str
    short: str
    name: str
    decimals: int
    group: str
    math: str = ""
    significant: int = 0

    @property
    def unit_text(self) -> str:
        """Printable unit, ``""`` when dimensionless."""
        return unit_text(self.unit)

    @property
    def title(self) -> str:
        """The prose name with a capital first letter."""
        return self.name[:1].upper() + self.name[1:]

    @property
    def symbol(self) -> str:
        """Mathtext label for figures."""
        return self.math or self.short

    def format(self, value: float, decimals: int | None = None) -> str:
        """`value` with this quantity's decimals or significant digits (U+2212 minus sign
        for negatives).

        Examples
        --------
        >>> [quantity("la").format(v) for v in (15.237, 2.3456, 0.33341, 9.9996)]
        ['15.2', '2.35', '0.333', '10.0']
        """
        if decimals is None and self.significant and value is not None \
                and math.isfinite(value) and value != 0.0:
            rounded = float(f"{float(value):.{self.significant}g}")  # 9.9996 -> 10.0
            decimals = max(0, self.significant - 1 - math.floor(math.log10(abs(rounded))))
        return format_signed(value, self.decimals if decimals is None else decimals)

    @property
    def column(self) -> str:
        """Table column name ``<key>_<unit>`` (``"melt_thickness_km"``); the bare key for a
        dimensionless quantity or a name (``"mean_melt_fraction"``, ``"melting_region"``).
        """
        suffix = _UNIT_SUFFIX.get(self.unit, "")
        return f"{self.key}_{suffix}" if suffix else self.key

    def axis_label(self, *, short: bool = False) -> str:
        """Axis label with the unit in parentheses (dimensionless: no parentheses)."""
        text = self.symbol if short else self.title
        return f"{text} ({self.unit_text})" if self.unit_text else text

    def with_value(self, value: float, decimals: int | None = None) -> str:
        """``"1350 °C"``: the formatted value and the printable unit."""
        unit = f" {self.unit_text}" if self.unit_text else ""
        return f"{self.format(value, decimals)}{unit}"


#: What each group of outputs tells a user (``lidmelt column`` headings).
GROUPS = {
    "input": "inputs",
    "where": "where it melts",
    "amount": "how much",
    "melt": "what melt",
    "data": "observed",
    "error": "model error",
}


def _q(key, unit, short, name, decimals, group, math="", significant=0) -> Quantity:
    return Quantity(key, unit, short, name, decimals, group, math, significant)


def _rare_earth(element: str) -> Quantity:
    """An element of the pooled melt in ppm (``la`` -> column ``la_ppm``), 3 significant
    digits: pooled melts hold from tenths of a ppm (Lu) to tens of ppm (La, small F)."""
    return _q(element.lower(), "ppm", element, f"{element} of the pooled melt", 2, "melt",
              element, 3)


_ALL = (
    # inputs of melt_column
    _q("potential_temperature", "degC", "Tp", "mantle potential temperature", 0, "input",
       "$T_p$"),
    _q("lithosphere_thickness", "km", "lid", "lid (lithosphere) thickness", 1, "input"),
    _q("water", "ppm", "H2O", "source water content", 0, "input",
       "H$_2$O"),
    _q("active_upwelling", "-", "upw", "active upwelling", 2, "input",
       "active upwelling"),
    _q("solidus_offset", "degC", "dTs", "solidus offset", 1, "input", r"$\Delta T_s$"),
    _q("crust_density", "kg/m^3", "rho_c", "crust density", 0, "input", r"$\rho_c$"),
    _q("mantle_density", "kg/m^3", "rho_m", "mantle density", 0, "input", r"$\rho_m$"),
    _q("parameterization", "", "param", "melting parameterization", 0, "input"),
    _q("melting_region", "", "region", "melting region", 0, "input"),
    # where melting happens
    _q("onset_depth", "km", "onset", "depth where melting starts", 1, "where"),
    _q("top_depth", "km", "top", "depth where melting stops", 1, "where"),
    _q("onset_pressure", "GPa", "P onset", "pressure where melting starts", 2, "where",
       "$P_{onset}$"),
    _q("top_pressure", "GPa", "P top", "pressure where melting stops", 2, "where",
       "$P_{top}$"),
    # how much melt
    _q("melt_thickness", "km", "melt", "melt thickness", 2, "amount"),
    _q("crustal_thickness", "km", "crust", "igneous crust thickness", 2, "amount"),
    # what melt
    _q("mean_melt_fraction", "-", "F mean", "mean melt fraction of the pooled melt", 3,
       "melt", r"$\bar F$"),
    _q("max_melt_fraction", "-", "F max", "largest melt fraction", 3, "melt",
       "$F_{max}$"),
    _q("top_melt_fraction", "-", "F top", "melt fraction at the top of melting", 3, "melt",
       "$F_{top}$"),
    _q("mean_melting_pressure", "GPa", "P mean", "mean melting pressure", 2, "melt",
       r"$\bar P$"),
    # rare-earth ratios of the pooled melt ("cn": of chondrite-normalised concentrations)
    _q("la_yb", "cn", "La/Yb", "chondrite-normalised La/Yb of the pooled melt", 3, "melt",
       "(La/Yb)$_N$"),
    _q("sm_yb", "cn", "Sm/Yb", "chondrite-normalised Sm/Yb of the pooled melt", 3, "melt",
       "(Sm/Yb)$_N$"),
    _q("dy_yb", "cn", "Dy/Yb", "chondrite-normalised Dy/Yb of the pooled melt", 3, "melt",
       "(Dy/Yb)$_N$"),
    # rare earths of the pooled melt (forward.trace.ELEMENTS)
    *(_rare_earth(e) for e in ("La", "Ce", "Nd", "Sm", "Eu", "Gd", "Dy", "Er", "Yb", "Lu")),
    # axes and observed quantities
    _q("pressure", "GPa", "P", "pressure", 2, "data"),
    _q("temperature", "degC", "T", "temperature", 0, "data"),
    _q("depth", "km", "z", "depth", 1, "data"),
    _q("melt_fraction", "-", "F", "equilibrium melt fraction", 2, "data"),
    # model errors of observation blocks (`<block>.model_error`); unit from the block
    _q("model_error", "", "σ_model", "model error", 2, "error", r"$\sigma_{model}$"),
    _q("temperature_model_error", "degC", "σ_model,T", "temperature model error", 0,
       "error", r"$\sigma_{model,T}$"),
    # correction choices of basalt chemistry blocks (`<block>.olivine_fo`, ...)
    _q("olivine_fo", "-", "Fo", "Fo of the mantle olivine of the primary melts", 3,
       "error", "Fo"),
    _q("fe3_fraction", "-", "Fe3+/ΣFe", "Fe3+/ΣFe of the analysed melts", 3, "error",
       r"Fe$^{3+}$/$\Sigma$Fe"),
)

#: Every known quantity by key.
QUANTITIES: dict[str, Quantity] = {q.key: q for q in _ALL}


def quantity(key: str, *, unit: str | None = None) -> Quantity:
    """The `Quantity` of `key`; a dotted ``prefix.suffix`` falls back to the suffix.

    Parameters
    ----------
    key : str
        A key of `QUANTITIES`, or ``"<prefix>.<suffix>"`` whose suffix is one (the
        prefix names what it belongs to, e.g. an observation block).
    unit : str, optional
        Overrides the unit (a block's model error has the unit of its data).

    Raises
    ------
    KeyError
        Neither the key nor its suffix is known.
    """
    found = QUANTITIES.get(key)
    if found is None:
        prefix, _, suffix = key.rpartition(".")
        if not prefix or suffix not in QUANTITIES:
            raise KeyError(f"no quantity {key!r} in lidmelt.forward.quantities")
        base = QUANTITIES[suffix]
        # The prefix goes into every label, so two blocks' errors never look alike.
        found = replace(base, key=key, name=f"{base.name} of {prefix}",
                        short=f"{prefix} {base.short}", math=f"{base.symbol}, {prefix}")
    return found if unit is None else replace(found, unit=unit)
