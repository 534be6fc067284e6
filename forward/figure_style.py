"""lidmelt's own colours and line styles, shared by every figure (see docs/figures.md).

The scheme, in words:

* melting curves of the rock are earth-brown: the solidus a solid line, lherzolite-out
  (clinopyroxene exhausted) long dashes, the liquidus a thin dash-dot; a wet solidus is
  deep teal;
* equilibrium melt-fraction contours are thin sage-grey lines labelled on the line;
* the lid is slate-violet: a pale band over the lid and a thick dotted line at its base
  (a horizontal line, unlike any melting curve), with the depth written on it;
* mantle potential temperatures run from a cold indigo through amber to a hot maroon;
* a solid adiabat is a thin line of its path's colour with short dots; the melting path
  is a thick line of the same colour ending in a ring at the onset of melting;
* the posterior is steel blue (draws, bands, contours), its MAP a wine-red diamond or
  line, priors ochre;
* observations are near-black with white-filled markers; pressures without a measured
  temperature are horizontal bands of their ±1σ range.
"""

from __future__ import annotations

import numpy as np

__all__ = ["CURVES", "INK", "LID", "MAP", "OBSERVED", "POSTERIOR", "PRIOR", "CONTOUR",
           "WET_SOLIDUS", "temperature_colors"]

INK = "#26221e"           # text-dark, for observations
POSTERIOR = "#3f6e9a"     # steel blue: posterior draws, bands, contours
MAP = "#8c1c3a"           # wine red: the maximum a posteriori point
PRIOR = "#c08a1e"         # ochre: prior densities
LID = "#5b4a8a"           # slate violet: the lid and its base
LID_FILL = "#ebe7f3"
CONTOUR = "#8f9c86"       # sage grey: melt-fraction contours
WET_SOLIDUS = "#1d6f6a"   # deep teal

#: Style of each named melting curve of a parameterization.
CURVES = {
    "solidus": dict(color="#6b4423", lw=1.9, ls="-"),
    "lherzolite-out": dict(color="#a0703f", lw=1.3, ls=(0, (7, 3))),
    "liquidus": dict(color="#6b4423", lw=1.0, ls=(0, (5, 2, 1, 2))),
}

#: The lid base: thick, dotted, violet (nothing else in a figure looks like it).
LID_LINE = dict(color=LID, lw=2.2, ls=(0, (1, 1.6)))

#: Observation markers and error bars.
OBSERVED = dict(fmt="D", color=INK, mfc="white", mec=INK, ms=5, capsize=2.5, lw=1.0)

# Cold to hot: indigo, blue, sky, amber, orange, red, maroon (no greens: those are the
# contours and the wet solidus).
_TEMPERATURE_RAMP = ["#27306e", "#2f6db5", "#5aa6d6", "#e0a526", "#e06a28", "#b8322a",
                     "#6e1423"]


def temperature_colors(values) -> dict[float, str]:
    """A colour per potential temperature, ordered cold (indigo) to hot (brick red).

    Colours are interpolated along the ramp, so any number of values stays distinct.
    """
    values = sorted({float(v) for v in values})
    ramp = np.array([[int(c[i:i + 2], 16) for i in (1, 3, 5)] for c in _TEMPERATURE_RAMP])
    where = np.linspace(0.0, len(ramp) - 1.0, len(values)) if len(values) > 1 else [5.0]
    if len(values) <= len(ramp):
        where = np.round(where)  # the ramp's own colours, not blends, while they last
    out = {}
    for value, x in zip(values, where, strict=True):
        rgb = [np.interp(x, np.arange(len(ramp)), ramp[:, k]) for k in range(3)]
        out[value] = "#" + "".join(f"{round(c):02x}" for c in rgb)
    return out
