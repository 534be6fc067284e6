"""Basalt chemistry: primary melts by olivine addition, and melt thermobarometry.

Pure, vectorised numpy functions (no I/O): compositions in, arrays and frozen
dataclasses out. See docs/model.md, "Basalt chemistry: primary melts and
thermobarometry", for every equation, coefficient and source.

Modules
-------
oxides
    Oxide molar masses, iron valence split, totals, normalisation, mole and cation
    fractions.
olivine
    Fe-Mg exchange (Roeder & Emslie 1970, Toplis 2005) and `add_olivine`.
thermobarometers
    Lee et al. (2009) and Putirka (2008) melt thermometers and barometer.
propagation
    Pressure and temperature with their error covariance, by Monte Carlo and by
    linearisation.

Results are scientific estimates that depend on the chosen methods and corrections;
they are no basis on their own for hazard or resource decisions.
"""
