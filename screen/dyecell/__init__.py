"""Dye-cell mode: organic sensitiser dyes against a semiconductor oxide and a redox mediator.

The second device family of dascreen.  It reuses every stage up to
``levels.csv`` (the same structures, ΔSCF values and protocol) and adds:

- :mod:`~screen.dyecell.scales` — V vs NHE, V vs Fc⁺/Fc and the vacuum scale;
- :mod:`~screen.dyecell.library` — oxides, mediators and reference electrodes (sourced), user one-row files;
- :mod:`~screen.dyecell.anchors` — anchoring-group recognition (RDKit SMARTS);
- :mod:`~screen.dyecell.calibrate` — E(S⁺/S) vs NHE and E₀₋₀ fitted on the dye reference set;
- :mod:`~screen.dyecell.model` — driving forces, viability, Jsc, Voc, FF, PCE and its Monte-Carlo spread;
- :mod:`~screen.dyecell.rank` — vectorised ranking; :mod:`~screen.dyecell.stage` — files in → files out.
"""
