"""Dye-cell mode: organic sensitiser dyes against a semiconductor oxide and a redox mediator.

The second device family of dascreen.  It reuses every stage up to
``levels.csv`` (the same structures, ΔSCF values and protocol) and adds:

- :mod:`~screen.dyecell.scales` — V vs NHE, V vs Fc⁺/Fc and the vacuum scale;
- :mod:`~screen.dyecell.library` — oxides, mediators and reference electrodes (sourced), user one-row files;
- :mod:`~screen.dyecell.anchors` — anchoring-group recognition (RDKit SMARTS);
- :mod:`~screen.dyecell.calibrate` — E(S⁺/S) vs NHE and E₀₋₀ fitted on the dye reference set;
- :mod:`~screen.dyecell.model` — driving forces, viability, Jsc, Voc, FF, PCE and its Monte-Carlo spread;
- :mod:`~screen.dyecell.checks` — sanity of dye, oxide and mediator files (units, signs, ids), before ranking;
- :mod:`~screen.dyecell.rank` — vectorised ranking; :mod:`~screen.dyecell.stage` — files in → files out;
- :mod:`~screen.dyecell.flags` (the flag registry), :mod:`~screen.dyecell.options` (the ``dyecell`` config
  section), :mod:`~screen.dyecell.cli` (``dascreen dyecell``).

The report page is :mod:`screen.dyecell.page` with the energy diagram of
:mod:`screen.dyecell.figure`.  Files: ``OUT/dyecell/dyes.csv`` (the dye table, cached) and
``OUT/dyecell/<oxide>--<mediator>--<settings hash>/`` (``ranking.csv``, ``ranking.safe.csv``, ``ranking.meta.json``,
``shortlist.sdf``, ``report.html``).
"""
