"""2-D structure drawings of molecules as inline SVG (RDKit), for the shortlist table."""

from __future__ import annotations

import re

from screen.report.format import esc, text

__all__ = ["molecule_svg", "MOL_W", "MOL_H"]

#: Structure drawings, CSS pixels.
MOL_W, MOL_H = 170, 116


def _draw(smiles: str, width: int, height: int) -> str | None:
    """RDKit's SVG text of one molecule; None if it cannot be read or drawn."""
    from rdkit import Chem
    from rdkit.Chem import rdDepictor
    from rdkit.Chem.Draw import rdMolDraw2D
    from rdkit.rdBase import BlockLogs

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
        cannot read the SMILES.

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
