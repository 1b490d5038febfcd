"""2D depictions of structures as SVG (RDKit's rdMolDraw2D), for the web pages and reports."""

from __future__ import annotations

from rdkit import Chem
from rdkit.Chem import rdDepictor
from rdkit.Chem.Draw import rdMolDraw2D

from library.errors import OlibraError


def structure_svg(molfile: str, smiles: str, *, width_px: int = 360, height_px: int = 260) -> str:
    """SVG text of the stored structure (molfile, else SMILES), stereo and isotope labels shown."""
    from library.structures import StructureError, mol_from_smiles

    mol = Chem.MolFromMolBlock(molfile, removeHs=False) if molfile else None
    if mol is None:
        try:
            mol = mol_from_smiles(smiles)
        except StructureError:
            raise OlibraError("the stored structure cannot be drawn; check the material's structure") from None
    mol = Chem.RemoveHs(mol)  # keeps isotope-labelled hydrogens (deuterium), which are shown
    if mol.GetNumConformers() == 0 or mol.GetConformer().Is3D():
        rdDepictor.Compute2DCoords(mol)
    drawer = rdMolDraw2D.MolDraw2DSVG(width_px, height_px)
    options = drawer.drawOptions()
    options.addStereoAnnotation = True
    options.clearBackground = False
    rdMolDraw2D.PrepareAndDrawMolecule(drawer, mol)
    drawer.FinishDrawing()
    return drawer.GetDrawingText()

