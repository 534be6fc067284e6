"""Melt thermobarometers for primary mantle melts, one module per publication.

``METHODS`` maps a key to its `Thermobarometer`:

- ``lee2009``: Lee et al. (2009) thermometer and barometer;
- ``putirka2008_eq13``, ``_eq14``, ``_eq15``, ``_eq22``: Putirka (2008) thermometers,
  each paired with the Lee et al. (2009) barometer.

Plank & Forsyth (2016) is not included: its coefficients could not be verified
(docs/model.md). Putirka's eq. 16 is for plagioclase-saturated crustal melts and is
left out.

Examples
--------
>>> sorted(METHODS)[:2]
['lee2009', 'putirka2008_eq13']
"""

from .base import Thermobarometer
from .lee2009 import LEE2009
from .putirka2008 import PUTIRKA2008_EQ13, PUTIRKA2008_EQ14, PUTIRKA2008_EQ15, PUTIRKA2008_EQ22

__all__ = ["METHODS", "Thermobarometer"]

METHODS: dict[str, Thermobarometer] = {
    m.key: m for m in (LEE2009, PUTIRKA2008_EQ13, PUTIRKA2008_EQ14, PUTIRKA2008_EQ15,
                       PUTIRKA2008_EQ22)
}
