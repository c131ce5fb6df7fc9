"""Structure standardization for measured species.

The goal is one canonical structure per measured species without moving the
ionizable hydrogen: keep the largest organic fragment (drop counter-ions and
solvent), normalize functional-group drawings (nitro, N-oxides, ...), and
neutralize charges only by adding or removing protons on charged acids and
bases.  Tautomers are left as drawn on purpose (canonicalizing them could move
the proton whose loss was measured), with one exception: the N-H of an azole
ring (imidazole, pyrazole, triazole, tetrazole, the five-membered ring of a
purine) goes to one fixed ring N, so that the two drawings of a 4(5)-substituted
imidazole are one structure; both tautomers share the cation and the anion, so
no measured proton is lost by it.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

from rdkit import Chem, RDLogger
from rdkit.Chem.MolStandardize import rdMolStandardize

from .graph import atoms_of

ORIGINAL_INDEX = "pkasite_orig_idx"


class StructureError(ValueError):
    """A structure that cannot be used, with a short reason."""


@dataclass(frozen=True)
class Standardized:
    mol: Chem.Mol
    smiles: str
    inchikey: str
    site_atom: int | None  # index of the given site atom in ``smiles`` (None if not given)
    original_atoms: tuple[int, ...] = ()  # for each atom of ``mol``, its index in the input (-1: added)
    azole_tautomers_differ: bool = False  # an azole ring's N-H tautomers are different structures (redrawn)


@lru_cache(maxsize=1)
def _tools():
    return (
        rdMolStandardize.LargestFragmentChooser(preferOrganic=True),
        rdMolStandardize.Normalizer(),
        rdMolStandardize.Uncharger(),
    )


# A hydroxy or mercapto group on an aromatic carbon next to a pyridine-type ring N, or para to one across a
# six-membered ring, is the minor (lactim, thiolactim) drawing of an oxo or thioxo compound in water:
# 2-pyridone and 4-pyridone outweigh their hydroxy tautomers by about 10^3 (Albert and Katritzky's
# tautomer studies, from memory).  Standardization keeps the drawn tautomer (see the module note), so the
# sites found, and their values, follow the drawing.
_LACTIM = tuple(Chem.MolFromSmarts(s) for s in (
    "[OX2H1,SX2H1]-[c;$(c:[nX2])]",
    "[OX2H1,SX2H1]-c1:c:c:[nX2]:c:c:1",
))


def lactim_drawing(mol: Chem.Mol) -> bool:
    """True when ``mol`` is drawn as a hydroxy/mercapto tautomer (lactim) of an aromatic N-heterocycle
    whose oxo/thioxo (lactam) form often predominates in water (2-/4-hydroxypyridine, hydroxy
    pyrimidines, 2-mercaptopyridine; for hydroxy azoles next to a ring N the balance varies:
    3-hydroxyisoxazoles stay largely hydroxy, from memory); 3-hydroxypyridine and 8-hydroxyquinoline
    are plain phenols and do not count."""
    return any(mol.HasSubstructMatch(q) for q in _LACTIM)


LACTIM_WARNING = ("drawn as a hydroxy/mercapto tautomer of an N-heterocycle (in water the oxo/thioxo form "
                  "often predominates); sites and values follow the drawing, so compare with the other form")


def _moved_ring_h(mol: Chem.Mol, donor: int, acceptor: int) -> Chem.Mol | None:
    """``mol`` with the H of ring N ``donor`` moved to ring N ``acceptor`` (None if that cannot be drawn).
    Atom order is kept."""
    rw = Chem.RWMol(mol)
    for idx, h in ((donor, 0), (acceptor, 1)):
        a = rw.GetAtomWithIdx(idx)
        a.SetNoImplicit(True)
        a.SetNumExplicitHs(h)
    try:
        Chem.SanitizeMol(rw)
    except Exception:  # noqa: BLE001 - no Kekule structure for that tautomer: not a candidate
        return None
    return rw.GetMol()


def _azole_rings(mol: Chem.Mol) -> list[tuple[int, list[int]]]:
    """Per aromatic five-membered ring with one ring N-H and a pyridine-type ring N: (the N-H, the other N)."""
    out = []
    for ring in mol.GetRingInfo().AtomRings():
        if len(ring) != 5:
            continue
        atoms = [mol.GetAtomWithIdx(i) for i in ring]
        if not all(a.GetIsAromatic() for a in atoms):
            continue
        ring_n = [a for a in atoms if a.GetAtomicNum() == 7 and a.GetDegree() == 2 and a.GetFormalCharge() == 0]
        donors = [a.GetIdx() for a in ring_n if a.GetTotalNumHs() == 1]
        acceptors = [a.GetIdx() for a in ring_n if a.GetTotalNumHs() == 0]
        if len(donors) == 1 and acceptors:
            out.append((donors[0], acceptors))
    return out


_MAX_AZOLE_TAUTOMERS = 64


def azole_tautomers(mol: Chem.Mol) -> list[Chem.Mol]:
    """The N-H tautomers of ``mol``'s azole rings (each ring's H on each of its ring N in turn, rings
    combined), ``mol`` itself first; atom order is kept.  Beyond 64 combinations only ``mol`` (a
    polymer-like chain of azoles stays as drawn rather than costing seconds)."""
    rings = _azole_rings(mol)
    combos = 1
    for _, acceptors in rings:
        combos *= 1 + len(acceptors)
    if combos > _MAX_AZOLE_TAUTOMERS:
        return [mol]
    found = [mol]
    for donor, acceptors in rings:
        grown = []
        for m in found:
            grown.append(m)
            for acc in acceptors:
                other = _moved_ring_h(m, donor, acc)
                if other is not None:
                    grown.append(other)
        found = grown
    return found


def _azole_choice(mol: Chem.Mol) -> tuple[Chem.Mol, bool]:
    """(the fixed azole N-H tautomer of ``mol``, whether its tautomers are different structures: a
    4(5)-substituted imidazole such as histamine, a 3(5)-substituted pyrazole, a 7H/9H purine, but not
    imidazole or benzimidazole, whose tautomers are the same structure)."""
    tautomers = azole_tautomers(mol)
    if len(tautomers) == 1:
        return mol, False
    keyed = [(Chem.MolToSmiles(m), k) for k, m in enumerate(tautomers)]
    first = min(keyed)  # ties keep the earliest, the drawn one first
    return tautomers[first[1]], len({key for key, _ in keyed}) > 1


def canonical_azole_tautomer(mol: Chem.Mol) -> Chem.Mol:
    """One fixed N-H tautomer for the azole rings of ``mol``, whichever was drawn: the one whose canonical
    SMILES sorts first (a rule with no chemistry in it, only consistency: training and prediction see
    every compound in one drawing).  Atom order is kept; other tautomers (lactam/lactim, keto/enol) are
    left as drawn."""
    return _azole_choice(mol)[0]


AZOLE_TAUTOMER_WARNING = ("an azole ring whose N-H tautomers are different structures: predicted as one of "
                          "them chosen by a fixed rule, the same whichever is drawn (major_species shows it; "
                          "site atoms and types are that tautomer's), which need not be the major one in water")


def quiet_rdkit() -> None:
    """Silence RDKit's per-molecule warnings; callers report problems themselves."""
    RDLogger.DisableLog("rdApp.*")


def smiles_text_problem(text: str) -> str | None:
    """Why a (stripped) SMILES text would be misread, else None.

    RDKit ends a SMILES at the first whitespace and reads the rest as a name, so "CC O" parses as ethane
    and a character outside ASCII can end it too ("CCÖ" reads as ethane): both would give a prediction for
    another molecule. Whitespace is allowed only before a CXSMILES extension ("CC=CC |c:1|")."""
    if text.isascii() and text.isprintable() and " " not in text:
        return None  # the usual case, checked at C speed
    bad = next((i for i, ch in enumerate(text) if not ch.isascii() or (not ch.isprintable() and not ch.isspace())),
               None)
    if bad is not None:
        return f"SMILES contains the character {text[bad]!r} at position {bad + 1}; SMILES are plain ASCII"
    head, sep, rest = text.partition(next((ch for ch in text if ch.isspace()), " "))
    if sep and not (rest.strip().startswith("|") and rest.strip().endswith("|")):
        return (f"SMILES contains whitespace at position {len(head) + 1}; RDKit would read only {head!r} and take "
                "the rest as a name")
    return None


def parse_smiles(smiles: str) -> Chem.Mol:
    """Parse a SMILES string, raising :class:`StructureError` with the reason."""
    if smiles is None or not str(smiles).strip():
        raise StructureError("empty SMILES")
    if problem := smiles_text_problem(str(smiles).strip()):
        raise StructureError(problem)
    quiet_rdkit()
    mol = Chem.MolFromSmiles(str(smiles).strip())
    if mol is None:
        raise StructureError(f"RDKit cannot parse SMILES {smiles!r}")
    if mol.GetNumAtoms() == 0:
        raise StructureError("SMILES has no atoms")
    return mol


def parent_fragment(mol: Chem.Mol) -> Chem.Mol:
    """The largest organic fragment of ``mol``, charges as drawn (counter-ions and solvent dropped)."""
    return _tools()[0].choose(mol)


def standardize_mol(mol: Chem.Mol, site_atom: int | None = None, with_inchikey: bool = True) -> Standardized:
    """Standardize ``mol``; ``site_atom`` (index in ``mol``) is carried through.

    The N-H of azole rings is redrawn as :func:`canonical_azole_tautomer` does, so that every drawing of
    such a compound gives one structure, except when ``site_atom`` is given (moving the H would move the
    named site).

    ``with_inchikey=False`` skips the InChIKey (``inchikey`` is then empty): prediction needs no identity.
    """
    if site_atom is not None and not 0 <= site_atom < mol.GetNumAtoms():
        raise StructureError(f"site_atom {site_atom} is not an atom index of the structure")
    mol = Chem.Mol(mol)
    for atom in atoms_of(mol):
        atom.SetIntProp(ORIGINAL_INDEX, atom.GetIdx())
    _, normalizer, uncharger = _tools()
    try:
        out = parent_fragment(mol)
        out = normalizer.normalize(out)
        out = uncharger.uncharge(out)
        Chem.SanitizeMol(out)
    except Exception as exc:  # RDKit raises several unrelated types here
        raise StructureError(f"standardization failed: {exc}") from exc
    if not any(a.GetAtomicNum() == 6 for a in atoms_of(out)):
        raise StructureError("no carbon atom: not an organic structure")
    differ = False
    if site_atom is None:
        out, differ = _azole_choice(out)
    smiles = Chem.MolToSmiles(out)
    order = list(out.GetProp("_smilesAtomOutputOrder").strip("[]").rstrip(",").split(","))
    order = [int(i) for i in order if i != ""]
    original = tuple(out.GetAtomWithIdx(idx).GetIntProp(ORIGINAL_INDEX)
                     if out.GetAtomWithIdx(idx).HasProp(ORIGINAL_INDEX) else -1 for idx in order)
    new_site = None
    if site_atom is not None:
        if site_atom not in original:
            raise StructureError(f"site_atom {site_atom} is not in the kept fragment")
        new_site = original.index(site_atom)
    final = Chem.MolFromSmiles(smiles)
    if final is None:
        raise StructureError("standardized SMILES does not parse back")
    inchikey = Chem.MolToInchiKey(final) if with_inchikey else ""
    if with_inchikey and not inchikey:
        raise StructureError("no InChIKey for the standardized structure")
    return Standardized(final, smiles, inchikey, new_site, original, differ)


def standardize_smiles(smiles: str, site_atom: int | None = None) -> Standardized:
    """Parse and standardize a SMILES string (see :func:`standardize_mol`)."""
    return standardize_mol(parse_smiles(smiles), site_atom)
