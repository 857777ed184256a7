"""2-D structure drawings of molecules as inline SVG (RDKit), for the shortlist table."""

from __future__ import annotations

import re

from screen.report.format import esc, text

__all__ = ["molecule_svg", "drawable", "MOL_W", "MOL_H", "DRAW_MAX_HEAVY_ATOMS"]

#: Structure drawings, CSS pixels.
MOL_W, MOL_H = 170, 116


#: most heavy atoms of a structure that is drawn: RDKit's 2-D layout grows steeply with size (on this project's
#: machine, a chain of 500 carbons 0.14 s, 1000 1.0 s, 2000 9.9 s, 3000 stalled a dye report for minutes), and a
#: drawing of 170 px shows nothing of a larger one; the default limit of the screen is 200 heavy atoms
#: (``PrepareOptions.max_heavy_atoms``), so an ordinary structure is always drawn
DRAW_MAX_HEAVY_ATOMS = 500


def drawable(smiles: str) -> bool:
    """Whether a SMILES is small enough to be drawn (:data:`DRAW_MAX_HEAVY_ATOMS`, counted on RDKit's unsanitised
    parse after a length check that reads no longer text): the last guard of every report, whatever its input file
    let through. A SMILES that does not parse is 'drawable' (the drawing then says it cannot be read).

    >>> drawable("c1ccsc1"), drawable("C" * 501), drawable("C" * 10**6)
    (True, False, False)
    """
    from rdkit import Chem
    from rdkit.rdBase import BlockLogs

    from screen.prepare.checks import smiles_length_limit

    if len(smiles) > smiles_length_limit(DRAW_MAX_HEAVY_ATOMS):
        return False
    with BlockLogs():
        mol = Chem.MolFromSmiles(smiles, sanitize=False)
    return mol is None or mol.GetNumHeavyAtoms() <= DRAW_MAX_HEAVY_ATOMS


def _draw(smiles: str, width: int, height: int) -> str | None:
    """RDKit's SVG text of one molecule; None if it cannot be read or drawn, or is too large to draw
    (:func:`drawable`: the page then says no structure is available)."""
    from rdkit import Chem
    from rdkit.Chem import rdDepictor
    from rdkit.Chem.Draw import rdMolDraw2D
    from rdkit.rdBase import BlockLogs

    if not drawable(smiles):
        return None
    block = BlockLogs()  # an unreadable SMILES is reported on the page, not on stderr
    try:
        mol = Chem.MolFromSmiles(smiles)
        if mol is None or mol.GetNumAtoms() == 0:
            return None
        rdDepictor.Compute2DCoords(mol)
        drawer = rdMolDraw2D.MolDraw2DSVG(int(width), int(height))
        opts = drawer.drawOptions()
        opts.clearBackground = False
        opts.padding = 0.06
        opts.bondLineWidth = 1.5
        opts.fixedFontSize = -1
        rdMolDraw2D.PrepareAndDrawMolecule(drawer, mol)
        drawer.FinishDrawing()
        return drawer.GetDrawingText()
    except Exception:  # noqa: BLE001 - a drawing problem must not stop the report
        return None
    finally:
        del block


def _inline(svg: str, label: str) -> str:
    """RDKit's SVG trimmed for inline HTML: no prolog, header comment, namespace or px units."""
    svg = svg[svg.find("<svg"):]
    svg = svg.replace("<!-- END OF HEADER -->\n", "").replace("<!-- END OF HEADER -->", "")
    svg = re.sub(r"\s+xmlns:rdkit='[^']*'", "", svg, count=1)
    svg = re.sub(r"\s+xml:space='preserve'", "", svg, count=1)
    svg = re.sub(r"\s*baseProfile='full'", "", svg, count=1)
    svg = re.sub(r"^<svg\s+version='1.1'", "<svg", svg)
    svg = re.sub(r"(width|height)='(\d+)px'", r"\1='\2'", svg, count=2)
    svg = re.sub(r"\s*\n\s*", "\n", svg).strip()
    return svg.replace("<svg", f'<svg class="mol" role="img" aria-label="{esc(label)}"', 1)


def molecule_svg(smiles: str, label: str = "", width: int = MOL_W, height: int = MOL_H) -> str | None:
    """Inline SVG drawing of a molecule (RDKit ``MolDraw2DSVG``).

    Parameters
    ----------
    smiles : str
        Molecule; invalid or empty SMILES give None.
    label : str
        Accessible name of the drawing (escaped here).
    width, height : int
        Size in CSS pixels.

    Returns
    -------
    str or None
        ``<svg class="mol" …>`` without XML prolog, header comment or RDKit
        namespace attribute, with a transparent background; None if RDKit
        cannot read the SMILES or it has more than :data:`DRAW_MAX_HEAVY_ATOMS` heavy atoms.

    Examples
    --------
    >>> svg = molecule_svg("c1ccsc1", "thiophene")
    >>> svg.startswith('<svg class="mol"'), "<?xml" in svg
    (True, False)
    >>> molecule_svg("not a smiles") is None
    True
    """
    smiles = text(smiles).strip()
    if not smiles:
        return None
    svg = _draw(smiles, width, height)
    return None if svg is None else _inline(svg, label)
