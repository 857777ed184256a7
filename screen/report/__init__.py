"""Self-contained HTML report of a ranking, for a meeting with synthetic chemists.

:func:`write_report` turns one ranking (candidates against one partner) into
``report.html`` — a single file that opens offline: every style, drawing and
figure is inline, nothing is fetched from the network — and
``ranking.safe.csv``, the ranking with text cells neutralised for spreadsheet
programs.

The page has five parts:

1. *Run at a glance*: partner levels, computation and calibration, device-model
   parameters, ranking settings, counts, date and version, and a caution that
   the numbers are screening estimates.
2. *Shortlist for discussion*: 2-D structure drawings (RDKit, inline SVG), levels
   with σ, offsets, Voc, Jsc, PCE with σ, the probability of beating the target
   and every flag in plain words; sortable by clicking a column header (a small
   inline script; without it the table stays in rank order).  Every ranked row
   follows in a collapsible table.  A PCE capped at the detailed-balance limit
   (flag ``pce_capped``) is marked † and explained below the tables.
3. *Level alignment* and *Gap–offset map*: two Matplotlib figures as inline SVG.
4. *Not ranked and not viable*: every input row that was rejected or failed,
   with its reason, so nothing disappears silently; then the ranked pairs that
   are not viable (they keep their rank but get no efficiency), with theirs.
5. *Files beside this report*: relative links to the exports.

All user text (ids, names, SMILES, pass-through columns, error messages) is
HTML-escaped; Matplotlib escapes the text it writes into its SVG.

Modules: :mod:`~screen.report.format` (number and text helpers),
:mod:`~screen.report.drawings` (structure drawings), :mod:`~screen.report.figures`
(level diagram, efficiency map), :mod:`~screen.report.tables`,
:mod:`~screen.report.header` (run-at-a-glance cards), :mod:`~screen.report.page`
(page assembly; style and script in ``static/``), :mod:`~screen.report.export`
(spreadsheet-safe CSV) and :mod:`~screen.report.write` (the files).  The flag
vocabulary is :mod:`screen.flags`.

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, "Design rules for donors in bulk-heterojunction
   solar cells — towards 10 % energy-conversion efficiency",
   Adv. Mater. 18 (2006) 789–794. :doi:`10.1002/adma.200501717`
.. [2] OWASP Foundation, "CSV Injection" (leading ``=``, ``+``, ``-``, ``@``,
   tab and carriage return start a formula in common spreadsheet programs).

Examples
--------
>>> describe_flag("lumo_offset_low", {"device": {"min_delta_lumo_ev": 0.3}})
'LUMO offset to the partner below 0.30 eV — electron transfer from donor to acceptor is not assured'
>>> describe_flag("made_up_code")
'made_up_code'
>>> "role_assumed" in INFO_FLAGS, "lumo_offset_low" in INFO_FLAGS
(True, False)
"""

from __future__ import annotations

from screen import flags as _flags
from screen.flags import FLAGS, INFO_FLAGS
from screen.report.drawings import molecule_svg
from screen.report.export import safe_csv_frame
from screen.report.page import EXPORTS, render_report
from screen.report.write import write_report

__all__ = [
    "write_report",
    "render_report",
    "safe_csv_frame",
    "describe_flag",
    "molecule_svg",
    "FLAG_TEXT",
    "INFO_FLAGS",
    "EXPORTS",
]

#: Plain-language meaning of the ranking flags (``{…}`` fields filled by
#: :func:`describe_flag`); kept for callers of the former single-module report.
FLAG_TEXT = {c: f.text for c, f in FLAGS.items()}
#: Plain-language meaning of one ranking flag: :func:`screen.flags.describe`.
describe_flag = _flags.describe
