"""Feature vectors for ionizable sites.

A *site* is ``(mol, atom, kind, site_type)``: an RDKit molecule, the index of the
ionizable atom, ``"acid"`` or ``"base"`` and a site-type name (from the site
catalogue; unknown names fall into ``type_other``).  :func:`featurize_sites`
turns many sites into one float32 matrix whose columns are named by
:func:`site_feature_names`.  ``features/FEATURES.md`` documents every group.

Everything that depends on the molecule only (fingerprint, descriptors,
Gasteiger charges, distance matrix, per-atom flags) is computed once per
molecule object in a call and shared by all of its sites.

Pure functions of RDKit molecules: the input molecules are not modified (partial
charges are computed on a copy) and nothing is read from disk or network.
Molecules are expected hydrogen-suppressed (as produced by ``standardize``);
explicit hydrogen atoms are tolerated but change the fingerprints.
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any

import numpy as np
from rdkit import Chem
from rdkit.Chem import rdMolDescriptors, rdPartialCharges

from .delocalization import DL_NAMES, Conjugation, add_bond, delocalization_row
from .fingerprints import MAX_RADIUS, mol_fingerprint_counts, site_environment_ids
from .graph import atoms_of, bonds_of
from .hammett import HAM_NAMES, hammett_row
from .sites import KINDS

__all__ = [
    "FEATURES_VERSION",
    "FeatureSettings",
    "site_feature_names",
    "featurize_sites",
    "describe_site",
    "mol_fingerprint_counts",
]

#: Bump when the meaning or order of columns changes; stored in model bundles.
FEATURES_VERSION = 1

OTHER_TYPE = "other"

# --------------------------------------------------------------------------- settings


@dataclass(frozen=True)
class FeatureSettings:
    """How site features are built; stored in a model bundle via :meth:`to_dict`.

    radii         radii of the site-rooted environments (one block of ``n_bits`` each)
    n_bits        hashed width of each site-environment block
    mol_fp_bits   width of the molecule-level Morgan count fingerprint
    mol_fp_radius radius of the molecule-level fingerprint
    use_counts    counts (True) or 0/1 presence (False) in the fingerprint blocks
    type_prior    add ``type_prior``: the typical aqueous pKa the site catalog gives the site's type
                  (NaN for a type it does not list), so that trees can group types by their usual
                  strength and place a rare or unseen type among types of similar strength
    hammett_kinds add the ``ham_`` group (when not empty): sums of Hammett substituent constants
                  (sigma_m, sigma_p) on the six-membered aromatic ring the site sits in or on
                  (:mod:`.hammett`), filled for sites of these kinds and NaN for the others
    delocalization add the ``dl_`` group: the atoms that carry the site's charge in its ionized form and
                  those its neutral lone pair spreads to, by resonance (:mod:`.delocalization`)
    """

    radii: tuple[int, ...] = (1, 2, 3)
    n_bits: int = 256
    mol_fp_bits: int = 512
    mol_fp_radius: int = 2
    use_counts: bool = True
    type_prior: bool = False   # False keeps the column layout of bundles written before it existed
    hammett_kinds: tuple[str, ...] = ()  # likewise
    delocalization: bool = False         # likewise

    def __post_init__(self) -> None:
        radii = self.radii
        if isinstance(radii, (int, np.integer)):
            radii = (radii,)
        try:
            radii = tuple(int(r) for r in radii)
        except (TypeError, ValueError):
            raise ValueError(f"radii must be a sequence of integers, got {self.radii!r}") from None
        if len(set(radii)) != len(radii):
            raise ValueError(f"radii must not repeat, got {radii}")
        if any(not 0 <= r <= MAX_RADIUS for r in radii):
            raise ValueError(f"each radius must be in 0..{MAX_RADIUS}, got {radii}")
        object.__setattr__(self, "radii", radii)
        for name in ("n_bits", "mol_fp_bits"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 0:
                raise ValueError(f"{name} must be a non-negative integer, got {v!r}")
            object.__setattr__(self, name, int(v))
        if self.radii and self.n_bits == 0:
            raise ValueError("n_bits must be positive when radii are given (use radii=() to drop env_ features)")
        r = self.mol_fp_radius
        if isinstance(r, bool) or not isinstance(r, (int, np.integer)) or not 0 <= r <= MAX_RADIUS:
            raise ValueError(f"mol_fp_radius must be an integer in 0..{MAX_RADIUS}, got {r!r}")
        object.__setattr__(self, "mol_fp_radius", int(r))
        if not isinstance(self.use_counts, (bool, np.bool_)):
            raise ValueError(f"use_counts must be true or false, got {self.use_counts!r}")
        object.__setattr__(self, "use_counts", bool(self.use_counts))
        if not isinstance(self.type_prior, (bool, np.bool_)):
            raise ValueError(f"type_prior must be true or false, got {self.type_prior!r}")
        object.__setattr__(self, "type_prior", bool(self.type_prior))
        if not isinstance(self.delocalization, (bool, np.bool_)):
            raise ValueError(f"delocalization must be true or false, got {self.delocalization!r}")
        object.__setattr__(self, "delocalization", bool(self.delocalization))
        hk = self.hammett_kinds
        if isinstance(hk, str) or not all(k in KINDS for k in hk) or len(set(hk)) != len(tuple(hk)):
            raise ValueError(f"hammett_kinds must list distinct kinds from {KINDS}, got {hk!r}")
        object.__setattr__(self, "hammett_kinds", tuple(k for k in KINDS if k in hk))

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON/YAML-ready dict, including the feature version."""
        return {
            "version": FEATURES_VERSION,
            "radii": list(self.radii),
            "n_bits": self.n_bits,
            "mol_fp_bits": self.mol_fp_bits,
            "mol_fp_radius": self.mol_fp_radius,
            "use_counts": self.use_counts,
            "type_prior": self.type_prior,
            "hammett_kinds": list(self.hammett_kinds),
            "delocalization": self.delocalization,
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> FeatureSettings:
        """Inverse of :meth:`to_dict`; rejects unknown keys and other feature versions."""
        data = dict(data)
        version = data.pop("version", FEATURES_VERSION)
        if version != FEATURES_VERSION:
            raise ValueError(
                f"feature settings were written for feature version {version}, this code builds "
                f"version {FEATURES_VERSION}; re-featurize and retrain the model"
            )
        allowed = {"radii", "n_bits", "mol_fp_bits", "mol_fp_radius", "use_counts", "type_prior", "hammett_kinds",
                   "delocalization"}
        unknown = sorted(set(data) - allowed)
        if unknown:
            raise ValueError(f"unknown feature setting(s) {unknown}; allowed keys: {sorted(allowed)}")
        if "radii" in data:
            data["radii"] = tuple(data["radii"])
        if "hammett_kinds" in data:
            data["hammett_kinds"] = tuple(data["hammett_kinds"])
        return cls(**data)


# --------------------------------------------------------------------------- names

CTX_NAMES = (
    "ctx_el_c", "ctx_el_n", "ctx_el_o", "ctx_el_s", "ctx_el_p", "ctx_el_other",
    "ctx_aromatic", "ctx_in_ring", "ctx_ring_size", "ctx_n_rings",
    "ctx_degree", "ctx_heavy_neighbors", "ctx_total_h", "ctx_formal_charge",
    "ctx_sp", "ctx_sp2", "ctx_sp3",
)
RES_NAMES = (
    "res_co_on_o", "res_co_on_n", "res_co_on_c", "res_co_on_other",
    "res_so2_count", "res_po_count", "res_aromatic_neighbors", "res_cn_double",
    "res_nitro", "res_cyano", "res_vinyl_co",
    "res_op_acceptor", "res_op_donor", "res_op_aza",
    "res_total", "res_oxygen_partner_atoms",
)
IND_DISTANCES = (1, 2, 3, 4)
IND_CATEGORIES = ("f", "cl", "br", "i", "cf3", "cn", "no2", "co", "oalk", "namine", "pos", "neg", "arom")
IND_NAMES = tuple(f"ind_d{d}_{c}" for d in IND_DISTANCES for c in IND_CATEGORIES) + (
    "ind_en_sum",
    "ind_charge_sum",
)
CHG_NAMES = ("chg_site", "chg_nbr_mean", "chg_nbr_min", "chg_nbr_max", "chg_h_mean", "chg_h_sum", "chg_group")
HB_DISTANCES = (2, 3, 4, 5)
HB_NAMES = tuple(f"hb_d{d}" for d in HB_DISTANCES) + ("hb_ring6_7",)
MOL_DESC_NAMES = (
    "mol_heavy_atoms", "mol_logp", "mol_tpsa", "mol_rings", "mol_aromatic_rings", "mol_formal_charge",
)

# Pauling electronegativities (values from memory of the standard Pauling table,
# general chemistry reference, e.g. CRC Handbook).  Elements not listed count as
# carbon (2.55), i.e. contribute nothing to ind_en_sum.
PAULING_EN = {
    1: 2.20, 3: 0.98, 5: 2.04, 6: 2.55, 7: 3.04, 8: 3.44, 9: 3.98, 11: 0.93, 12: 1.31,
    13: 1.61, 14: 1.90, 15: 2.19, 16: 2.58, 17: 3.16, 19: 0.82, 32: 2.01, 33: 2.18,
    34: 2.55, 35: 2.96, 50: 1.96, 52: 2.10, 53: 2.66,
}
_EN_CARBON = 2.55
_ELEMENT_COL = {6: 0, 7: 1, 8: 2, 16: 3, 15: 4}


@dataclass(frozen=True)
class _Layout:
    names: tuple[str, ...]
    types: dict[str, int] = field(hash=False, compare=False)
    env: int
    typ: int
    kind: int
    ctx: int
    res: int
    ind: int
    chg: int
    hb: int
    mol: int  # descriptors followed by the fingerprint
    prior: int = -1  # the type_prior column (-1: not built)
    ham: int = -1    # the first ham_ column (-1: not built)
    dl: int = -1     # the first dl_ column (-1: not built)

    @property
    def n(self) -> int:
        return len(self.names)


def _clean_types(site_types: Iterable[str]) -> tuple[str, ...]:
    if isinstance(site_types, str):
        raise TypeError("site_types must be a list of names, not a single string")
    seen: list[str] = []
    for t in site_types:
        if not isinstance(t, str) or not t:
            raise ValueError(f"site type names must be non-empty strings, got {t!r}")
        if t not in seen:
            seen.append(t)
    if OTHER_TYPE not in seen:
        seen.append(OTHER_TYPE)
    return tuple(seen)


@lru_cache(maxsize=16)
def _layout(settings: FeatureSettings, site_types: tuple[str, ...]) -> _Layout:
    types = _clean_types(site_types)
    names: list[str] = []
    env = len(names)
    names += [f"env_r{r}_{b}" for r in settings.radii for b in range(settings.n_bits)]
    typ = len(names)
    names += [f"type_{t}" for t in types]
    prior = len(names) if settings.type_prior else -1
    if settings.type_prior:
        names.append("type_prior")
    kind = len(names)
    names.append("kind_acid")
    ctx = len(names)
    names += CTX_NAMES
    res = len(names)
    names += RES_NAMES
    ind = len(names)
    names += IND_NAMES
    chg = len(names)
    names += CHG_NAMES
    hb = len(names)
    names += HB_NAMES
    ham = len(names) if settings.hammett_kinds else -1
    if settings.hammett_kinds:
        names += HAM_NAMES
    dl = len(names) if settings.delocalization else -1
    if settings.delocalization:
        names += DL_NAMES
    mol = len(names)
    names += MOL_DESC_NAMES
    names += [f"mol_fp_{b}" for b in range(settings.mol_fp_bits)]
    return _Layout(tuple(names), {t: typ + i for i, t in enumerate(types)},
                   env, typ, kind, ctx, res, ind, chg, hb, mol, prior, ham, dl)


@lru_cache(maxsize=1)
def type_priors() -> Mapping[str, float]:
    """Site type name -> the packaged site catalog's typical aqueous pKa of that type."""
    from .sites import load_catalog  # the catalog module imports YAML and SMARTS; load it when needed
    return {t.name: float(t.prior) for t in load_catalog().types}


def site_feature_names(settings: FeatureSettings | None = None, site_types: Iterable[str] = ()) -> list[str]:
    """Column names of :func:`featurize_sites`, in order.

    ``site_types`` gives the ``type_*`` one-hot columns in the given order; a
    ``type_other`` column is always present (added last unless listed).
    """
    settings = settings or FeatureSettings()
    return list(_layout(settings, _clean_types(site_types)).names)


# --------------------------------------------------------------------------- per molecule


class _MolData:
    """Everything about one molecule that the site features need, computed once."""

    def __init__(self, mol: Chem.Mol, settings: FeatureSettings, roots: Iterable[int]):
        n = mol.GetNumAtoms()
        self.mol = mol
        self.n = n
        atoms = atoms_of(mol)
        self.atoms = atoms
        z = np.fromiter((a.GetAtomicNum() for a in atoms), dtype=np.int16, count=n)
        zl = z.tolist()  # Python ints: scalar lookups on lists are much cheaper than on arrays
        self.zl = zl
        self.aromatic = [a.GetIsAromatic() for a in atoms]
        fc = np.fromiter((a.GetFormalCharge() for a in atoms), dtype=np.float64, count=n)
        fcl = fc.tolist()
        self.fcl = fcl
        self.nhs = [a.GetTotalNumHs(includeNeighbors=True) for a in atoms]
        nbrs: list[list[int]] = [[] for _ in range(n)]
        h_nbrs: list[list[int]] = [[] for _ in range(n)]
        dbl_o: list[list[int]] = [[] for _ in range(n)]  # O atoms double-bonded to the atom
        dbl_n: list[list[int]] = [[] for _ in range(n)]
        dbl_c: list[list[int]] = [[] for _ in range(n)]
        triple_n = [False] * n
        walks = settings.delocalization
        if walks:
            c_single: list[list[int]] = [[] for _ in range(n)]
            c_double: list[list[int]] = [[] for _ in range(n)]
            c_arom: list[tuple[int, int]] = []
        for b in bonds_of(mol):
            i, j = b.GetBeginAtomIdx(), b.GetEndAtomIdx()
            zi, zj = zl[i], zl[j]
            if zj == 1:
                h_nbrs[i].append(j)
            else:
                nbrs[i].append(j)
            if zi == 1:
                h_nbrs[j].append(i)
            else:
                nbrs[j].append(i)
            bt = b.GetBondType()
            if walks:
                add_bond(c_single, c_double, c_arom, i, j, bt, zl)
            if bt == Chem.BondType.DOUBLE:
                for a, o, zo in ((i, j, zj), (j, i, zi)):
                    if zo == 8:
                        dbl_o[a].append(o)
                    elif zo == 7:
                        dbl_n[a].append(o)
                    elif zo == 6:
                        dbl_c[a].append(o)
            elif bt == Chem.BondType.TRIPLE:
                if zi == 6 and zj == 7:
                    triple_n[i] = True
                elif zj == 6 and zi == 7:
                    triple_n[j] = True
        self.nbrs, self.h_nbrs, self.dbl_o, self.dbl_n, self.dbl_c = nbrs, h_nbrs, dbl_o, dbl_n, dbl_c
        heavy_deg = [len(x) for x in nbrs]

        # nitro-type N: N with two terminal O neighbours (nitro, either drawing)
        nitro_o: list[list[int]] = [[] for _ in range(n)]
        for i in range(n):
            if zl[i] == 7:
                term = [o for o in nbrs[i] if zl[o] == 8 and heavy_deg[o] == 1]
                if len(term) >= 2:
                    nitro_o[i] = term
        self.nitro_o = nitro_o
        self.is_nitrile_c = [bool(triple_n[i]) and zl[i] == 6 for i in range(n)]
        # amide-like N (lone pair tied up by an adjacent C=O / S=O / P=O)
        amide_n = [
            zl[i] == 7 and any(zl[x] in (6, 15, 16) and dbl_o[x] for x in nbrs[i]) for i in range(n)
        ]
        self.amide_n = amide_n

        # inductive categories (n x n_cat)
        cat = np.zeros((n, len(IND_CATEGORIES)), dtype=np.float64)
        col = {c: k for k, c in enumerate(IND_CATEGORIES)}
        hyb = [a.GetHybridization() for a in atoms]
        self.hyb = hyb
        for i in range(n):
            zi = zl[i]
            if zi == 1:
                continue
            if zi == 9:
                cat[i, col["f"]] = 1
            elif zi == 17:
                cat[i, col["cl"]] = 1
            elif zi == 35:
                cat[i, col["br"]] = 1
            elif zi == 53:
                cat[i, col["i"]] = 1
            elif zi == 6:
                if sum(1 for x in nbrs[i] if zl[x] == 9) >= 3:
                    cat[i, col["cf3"]] = 1
                if self.is_nitrile_c[i]:
                    cat[i, col["cn"]] = 1
                if dbl_o[i]:
                    cat[i, col["co"]] = 1
            elif zi == 7:
                if nitro_o[i]:
                    cat[i, col["no2"]] = 1
                elif hyb[i] == Chem.HybridizationType.SP3 and not self.aromatic[i] and fcl[i] == 0:
                    cat[i, col["namine"]] = 1
            elif zi == 8:
                if (not self.aromatic[i] and fcl[i] == 0 and not dbl_o[i] and nbrs[i]
                        and all(zl[x] == 6 for x in nbrs[i]) and not any(i in dbl_o[x] for x in nbrs[i])):
                    cat[i, col["oalk"]] = 1
            if fcl[i] > 0 and not nitro_o[i] and not any(fcl[x] < 0 for x in nbrs[i]):
                cat[i, col["pos"]] = 1
            if fcl[i] < 0 and not any(fcl[x] > 0 for x in nbrs[i]):
                cat[i, col["neg"]] = 1
            if self.aromatic[i]:
                cat[i, col["arom"]] = 1
        self.cat = cat
        # formal charges that are not half of a charge-separated neutral group (nitro, N-oxide drawings)
        self.net_charge = fc * (cat[:, col["pos"]] + cat[:, col["neg"]])
        en = np.array([PAULING_EN.get(int(zi), _EN_CARBON) - _EN_CARBON for zi in z])
        en[z == 1] = 0.0  # hydrogens are not counted
        self.en = en

        # H-bond acceptors: O not positive; N not positive, not amide-like, not pyrrole-type
        acc = np.zeros(n, dtype=bool)
        for i in range(n):
            if fcl[i] > 0:
                continue
            if zl[i] == 8:
                acc[i] = True
            elif zl[i] == 7 and not amide_n[i] and not nitro_o[i]:
                if self.aromatic[i] and (self.nhs[i] > 0 or heavy_deg[i] >= 3):
                    continue
                acc[i] = True
        self.acceptor = acc

        dm = Chem.GetDistanceMatrix(mol)
        dm[dm > 1e6] = 0  # disconnected fragments: treat as unreachable (distance 0 never counted)
        self.dist = dm.astype(np.int32)

        ri = mol.GetRingInfo()
        self.ri = ri
        rings6: list[list[tuple[int, ...]]] = [[] for _ in range(n)]
        for ring in ri.AtomRings():
            if len(ring) == 6 and all(self.aromatic[a] for a in ring):
                for a in ring:
                    rings6[a].append(ring)
        self.rings6 = rings6

        # Gasteiger charges on a copy (the input molecule is not modified)
        work = Chem.Mol(mol)
        rdPartialCharges.ComputeGasteigerCharges(work)
        g = np.empty(n)
        gh = np.empty(n)
        for k, a in enumerate(atoms_of(work)):
            g[k] = a.GetDoubleProp("_GasteigerCharge")
            gh[k] = a.GetDoubleProp("_GasteigerHCharge")  # summed over implicit Hs
        self.gch = np.nan_to_num(g, nan=0.0, posinf=0.0, neginf=0.0)
        self.gch_h = np.nan_to_num(gh, nan=0.0, posinf=0.0, neginf=0.0)

        # molecule-level block: descriptors + Morgan count fingerprint
        desc = np.array(
            [
                mol.GetNumHeavyAtoms(),
                rdMolDescriptors.CalcCrippenDescriptors(mol)[0],
                rdMolDescriptors.CalcTPSA(mol),
                rdMolDescriptors.CalcNumRings(mol),
                rdMolDescriptors.CalcNumAromaticRings(mol),
                fc.sum(),
            ],
            dtype=np.float32,
        )
        if settings.mol_fp_bits:
            fp = mol_fingerprint_counts(mol, settings.mol_fp_radius, settings.mol_fp_bits, settings.use_counts)
            self.mol_vec = np.concatenate([desc, fp])
        else:
            self.mol_vec = desc
        self.env = (
            site_environment_ids(mol, roots, max(settings.radii)) if settings.radii else {}
        )
        self.conjugation = (Conjugation(zl, self.aromatic, fcl, self.nhs, c_single, c_double, c_arom) if walks
                            else None)

    # ----------------------------------------------------------------- per-site groups

    def ctx(self, s: int) -> list[float]:
        a = self.atoms[s]
        el = [0.0] * 6
        el[_ELEMENT_COL.get(self.zl[s], 5)] = 1.0
        ring = self.ri.NumAtomRings(s)
        h = self.hyb[s]
        HT = Chem.HybridizationType
        return el + [
            float(self.aromatic[s]),
            float(ring > 0),
            float(self.ri.MinAtomRingSize(s)) if ring else 0.0,
            float(ring),
            float(a.GetTotalDegree()),
            float(len(self.nbrs[s])),
            float(self.nhs[s]),
            float(self.fcl[s]),
            float(h == HT.SP),
            float(h == HT.SP2),
            float(h in (HT.SP3, HT.SP3D, HT.SP3D2)),
        ]

    def res(self, s: int) -> list[float]:
        z, nbrs, dbl_o = self.zl, self.nbrs, self.dbl_o
        co = so2 = po = arom = cn = nitro = cyano = vinyl = 0
        oxy = 1 if z[s] == 8 else 0
        for x in nbrs[s]:
            ox = [o for o in dbl_o[x] if o != s]
            zx = z[x]
            if ox:
                if zx == 6:
                    co += 1
                    oxy += len(ox)
                elif zx == 16 and len(ox) >= 2:
                    so2 += 1
                    oxy += len(ox)
                elif zx == 15:
                    po += 1
                    oxy += len(ox)
            if self.nitro_o[x]:
                nitro += 1
                oxy += sum(1 for o in self.nitro_o[x] if o != s)
            if self.aromatic[x]:
                arom += 1
            if zx == 6 and any(nn != s for nn in self.dbl_n[x]):
                cn += 1
            if self.is_nitrile_c[x]:
                cyano += 1
            if zx == 6 and not self.aromatic[x]:
                # vinylogous carbonyl: site-C=C-C(=O)
                for y in self.dbl_c[x]:
                    if y == s:
                        continue
                    for w in nbrs[y]:
                        if w != x and w != s and z[w] == 6:
                            wo = [o for o in dbl_o[w] if o != s]
                            if wo:
                                vinyl += 1
                                oxy += len(wo)
        # substituents at positions conjugated with the site through a 6-membered aromatic ring
        positions: dict[int, tuple[int, ...]] = {}
        for ring in self.rings6[s]:
            k0 = ring.index(s)
            for k, p in enumerate(ring):
                if min((k - k0) % 6, (k0 - k) % 6) in (1, 3):
                    positions.setdefault(p, ring)
        for x in nbrs[s]:
            for ring in self.rings6[x]:
                if s in ring:
                    continue
                k0 = ring.index(x)
                for k, p in enumerate(ring):
                    if min((k - k0) % 6, (k0 - k) % 6) in (1, 3):
                        positions.setdefault(p, ring)
        acc = don = aza = 0
        for p, ring in positions.items():
            if p == s:
                continue
            if z[p] == 7 and self.nhs[p] == 0 and len(nbrs[p]) == 2 and self.fcl[p] == 0:
                aza += 1
            for q in nbrs[p]:
                if q == s or q in ring:
                    continue
                zq = z[q]
                qo = [o for o in dbl_o[q] if o != s]
                if (zq == 6 and qo) or (zq == 16 and len(qo) >= 2):
                    acc += 1
                    oxy += len(qo)
                elif self.nitro_o[q]:
                    acc += 1
                    oxy += len(self.nitro_o[q])
                elif self.is_nitrile_c[q]:
                    acc += 1
                elif zq == 8 and not dbl_o[q] and not any(q in dbl_o[w] for w in nbrs[q]):
                    don += 1
                elif zq == 7 and self.fcl[q] <= 0 and not self.amide_n[q] and not self.aromatic[q] \
                        and not self.nitro_o[q] and not self.dbl_c[q]:
                    don += 1
        zs = z[s]
        co_cols = [0, 0, 0, 0]
        co_cols[{8: 0, 7: 1, 6: 2}.get(int(zs), 3)] = co
        total = co + so2 + po + arom + cn + nitro + cyano + vinyl + acc
        return co_cols + [so2, po, arom, cn, nitro, cyano, vinyl, acc, don, aza, total, oxy]

    def ind(self, s: int) -> np.ndarray:
        d = self.dist[s]
        onehot = (d[None, :] == np.array(IND_DISTANCES)[:, None]).astype(np.float64)  # (4, n)
        counts = onehot @ self.cat  # (4, n_cat)
        near = (d >= 1) & (d <= IND_DISTANCES[-1])
        en_sum = float(np.sum(self.en[near] / d[near].astype(np.float64) ** 2))
        reach = d >= 1
        charge_sum = float(np.sum(self.net_charge[reach] / d[reach]))
        return np.concatenate([counts.ravel(), [en_sum, charge_sum]])

    def chg(self, s: int) -> list[float]:
        g = self.gch
        nb = self.nbrs[s]
        if nb:
            v = g[nb]
            nmean, nmin, nmax = float(v.mean()), float(v.min()), float(v.max())
        else:
            nmean = nmin = nmax = 0.0
        h_sum = float(self.gch_h[s]) + float(sum(g[h] for h in self.h_nbrs[s]))
        n_h = self.nhs[s]
        h_mean = h_sum / n_h if n_h else 0.0
        return [float(g[s]), nmean, nmin, nmax, h_mean, h_sum, float(g[s]) + h_sum]

    def hb(self, s: int) -> list[float]:
        d = self.dist[s]
        acc = self.acceptor
        counts = [float(np.count_nonzero(acc & (d == k))) for k in HB_DISTANCES]
        ring = float(counts[HB_DISTANCES.index(4)] + counts[HB_DISTANCES.index(5)] > 0)
        return counts + [ring]


# --------------------------------------------------------------------------- public API


def _check_item(k: int, item: Any) -> tuple[Chem.Mol, int, str, str]:
    try:
        mol, atom, kind, site_type = item
    except (TypeError, ValueError):
        raise ValueError(f"site item {k}: expected (mol, atom, kind, site_type), got {item!r}") from None
    if not isinstance(mol, Chem.Mol):
        raise TypeError(f"site item {k}: mol must be an RDKit Mol, got {type(mol).__name__}")
    if isinstance(atom, bool) or not isinstance(atom, (int, np.integer)):
        raise TypeError(f"site item {k}: atom must be an integer index, got {atom!r}")
    n = mol.GetNumAtoms()
    if not 0 <= atom < n:
        raise IndexError(f"site item {k}: atom index {atom} out of range (molecule has {n} atoms)")
    if kind not in KINDS:
        raise ValueError(f"site item {k}: kind must be 'acid' or 'base', got {kind!r}")
    return mol, int(atom), kind, site_type


def featurize_sites(
    items: Iterable[tuple[Chem.Mol, int, str, str]],
    settings: FeatureSettings | None = None,
    site_types: Sequence[str] = (),
) -> np.ndarray:
    """Feature matrix (float32, one row per item) for ``(mol, atom, kind, site_type)`` items.

    Columns follow :func:`site_feature_names` ``(settings, site_types)``.
    Molecule-level work is done once per molecule object (``id(mol)``) per call.
    """
    settings = settings or FeatureSettings()
    layout = _layout(settings, _clean_types(site_types))
    checked = [_check_item(k, it) for k, it in enumerate(items)]
    X = np.zeros((len(checked), layout.n), dtype=np.float32)
    groups: dict[int, list[int]] = {}
    for row, (mol, _, _, _) in enumerate(checked):
        groups.setdefault(id(mol), []).append(row)

    nb = settings.n_bits
    n_res, n_ind, n_chg, n_hb = len(RES_NAMES), len(IND_NAMES), len(CHG_NAMES), len(HB_NAMES)
    other_col = layout.types[OTHER_TYPE]
    priors = type_priors() if layout.prior >= 0 else {}
    for rows in groups.values():
        mol = checked[rows[0]][0]
        md = _MolData(mol, settings, {checked[r][1] for r in rows})
        X[rows, layout.mol:] = md.mol_vec
        for row in rows:
            _, s, kind, site_type = checked[row]
            x = X[row]
            env = md.env.get(s, {})
            for i, r in enumerate(settings.radii):
                ident = env.get(r)
                if ident is not None:
                    x[layout.env + i * nb + ident % nb] += 1.0
            x[layout.types.get(site_type, other_col)] = 1.0
            if layout.prior >= 0:
                x[layout.prior] = priors.get(site_type, np.nan)
            x[layout.kind] = 1.0 if kind == "acid" else 0.0
            x[layout.ctx:layout.ctx + len(CTX_NAMES)] = md.ctx(s)
            x[layout.res:layout.res + n_res] = md.res(s)
            x[layout.ind:layout.ind + n_ind] = md.ind(s)
            x[layout.chg:layout.chg + n_chg] = md.chg(s)
            x[layout.hb:layout.hb + n_hb] = md.hb(s)
            if layout.ham >= 0:
                x[layout.ham:layout.ham + len(HAM_NAMES)] = (hammett_row(md, s) if kind in settings.hammett_kinds
                                                             else np.nan)
            if layout.dl >= 0:
                x[layout.dl:layout.dl + len(DL_NAMES)] = delocalization_row(md, s, kind)
    if not settings.use_counts and settings.radii:
        block = X[:, layout.env:layout.env + len(settings.radii) * nb]
        np.minimum(block, 1.0, out=block)
    return X


def describe_site(
    mol: Chem.Mol,
    atom: int,
    kind: str,
    site_type: str = OTHER_TYPE,
    settings: FeatureSettings | None = None,
    site_types: Sequence[str] = (),
    nonzero_only: bool = False,
) -> dict[str, float]:
    """Named features of one site, for inspection, warnings and tests."""
    settings = settings or FeatureSettings()
    names = site_feature_names(settings, site_types)
    row = featurize_sites([(mol, atom, kind, site_type)], settings, site_types)[0]
    return {n: float(v) for n, v in zip(names, row) if not nonzero_only or v != 0}
