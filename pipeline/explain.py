"""Why the model predicts what it predicts, in chemistry words.

LightGBM's ``pred_contrib`` gives, for every feature column, its additive share of
one prediction (in pKa log units) plus a bias term; the shares and the bias sum to
the prediction.  Here the columns are pooled by chemical idea (all site-environment
bits together, all molecule-level columns together, each resonance partner, each
inductive substituent over its bond distances, ...) and each pool is worded from the
site's own feature values, e.g. ``"two S=O (sulfonyl) next to the N-H: -3.1"``.

Pure functions of a model bundle and RDKit molecules; nothing is read or written.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
from rdkit import Chem

from pkasite.features.site_features import featurize_sites, site_feature_names

__all__ = ["SiteExplanation", "explain_sites", "explain_sites_full", "format_explanation", "feature_groups"]

_WORDS = {0: "no", 1: "one", 2: "two", 3: "three", 4: "four", 5: "five", 6: "six"}

# inductive categories: (singular, plural)
_IND_NOUNS = {
    "f": ("fluorine", "fluorines"), "cl": ("chlorine", "chlorines"), "br": ("bromine", "bromines"),
    "i": ("iodine", "iodines"), "cf3": ("CF3 group", "CF3 groups"), "cn": ("nitrile carbon", "nitrile carbons"),
    "no2": ("nitro group", "nitro groups"), "co": ("C=O carbon", "C=O carbons"),
    "oalk": ("ether/alcohol O", "ether/alcohol O atoms"), "namine": ("amine N", "amine N atoms"),
    "pos": ("positive charge", "positive charges"), "neg": ("negative charge", "negative charges"),
    "arom": ("aromatic atom", "aromatic atoms"),
}

_RES_SINGLE = {
    # column: (group key, phrase maker(count, site))
    "res_so2_count": "res_so2", "res_po_count": "res_po", "res_aromatic_neighbors": "res_arom",
    "res_cn_double": "res_cn", "res_nitro": "res_nitro", "res_cyano": "res_cyano", "res_vinyl_co": "res_vinyl",
    "res_op_acceptor": "res_op_acceptor", "res_op_donor": "res_op_donor", "res_op_aza": "res_op_aza",
    "res_total": "res_total", "res_oxygen_partner_atoms": "res_total",
}


@dataclass
class SiteExplanation:
    """All feature-group contributions of one site, largest magnitude first."""

    prediction: float
    bias: float
    groups: list[tuple[str, str, float]] = field(default_factory=list)  # (group key, phrase, contribution)

    def top(self, n: int | None = 4) -> list[tuple[str, float]]:
        items = self.groups if n is None else self.groups[:n]
        return [(phrase, value) for _, phrase, value in items]


def _group_key(name: str) -> str:
    """The chemical idea a feature column belongs to."""
    if name.startswith("env_"):
        return "env"
    if name.startswith("mol_"):
        return "mol"
    if name.startswith("type_") or name == "kind_acid":
        return "type"
    if name.startswith("ctx_"):
        return "ctx"
    if name.startswith("res_co_on_"):
        return "res_carbonyl"
    if name in _RES_SINGLE:
        return _RES_SINGLE[name]
    m = re.fullmatch(r"ind_d\d+_(\w+)", name)
    if m:
        return f"ind_{m.group(1)}"
    if name in ("ind_en_sum", "ind_charge_sum"):
        return name
    if name.startswith("chg_"):
        return "chg"
    if name.startswith("hb_"):
        return "hb"
    if name.startswith("ham_"):
        return "ham"
    if name.startswith("dl_ion_"):
        return "dl_ion"
    if name.startswith("dl_lp_"):
        return "dl_lp"
    return "other"


def feature_groups(names: list[str]) -> dict[str, np.ndarray]:
    """Group key -> column indices; every column belongs to exactly one group."""
    out: dict[str, list[int]] = {}
    for i, name in enumerate(names):
        out.setdefault(_group_key(name), []).append(i)
    return {k: np.asarray(v, dtype=int) for k, v in out.items()}


def _count(n: float) -> str:
    k = int(round(n))
    return _WORDS.get(k, str(k))


def _site_label(mol: Chem.Mol, atom: int, kind: str) -> str:
    el = mol.GetAtomWithIdx(int(atom)).GetSymbol()
    return f"the {el}-H" if kind == "acid" else f"the basic {el}"


def _plural(n: float, one: str, many: str) -> str:
    return one if int(round(n)) == 1 else f"{_count(n)} {many}"


def _phrase(key: str, v: dict[str, float], site: str, site_type: str) -> str:
    """Words for one group, from the feature values of the site."""
    if key == "env":
        return "local environment (circular fingerprint)"
    if key == "mol":
        return "whole-molecule context"
    if key == "type":
        return f"site type {site_type}"
    if key == "ctx":
        el = next((e.upper() if len(e) == 1 else e for e in ("c", "n", "o", "s", "p") if v.get(f"ctx_el_{e}")),
                  "other element")
        hyb = "sp" if v.get("ctx_sp") else "sp2" if v.get("ctx_sp2") else "sp3" if v.get("ctx_sp3") else ""
        arom = "aromatic " if v.get("ctx_aromatic") else ""
        ring = f", in a {int(v['ctx_ring_size'])}-ring" if v.get("ctx_in_ring") and not arom else ""
        charge = v.get("ctx_formal_charge", 0.0)
        chg = f", charge {charge:+.0f}" if charge else ""
        return f"site atom {arom}{hyb} {el} with {int(v.get('ctx_total_h', 0))} H{ring}{chg}".replace("  ", " ")
    if key == "res_carbonyl":
        n = sum(val for name, val in v.items() if name.startswith("res_co_on_"))
        if n == 0:
            return f"no carbonyl conjugated with {site}"
        return f"{_plural(n, 'carbonyl', 'carbonyls')} conjugated with {site}"
    if key == "res_so2":
        n = v.get("res_so2_count", 0)
        if n == 0:
            return f"no sulfonyl next to {site}"
        if round(n) == 1:
            return f"two S=O (sulfonyl) next to {site}"
        return f"{_count(n)} sulfonyl groups next to {site}"
    if key == "res_po":
        n = v.get("res_po_count", 0)
        return f"no P=O next to {site}" if n == 0 else f"{_plural(n, 'P=O', 'P=O groups')} next to {site}"
    if key == "res_arom":
        n = v.get("res_aromatic_neighbors", 0)
        if n == 0:
            return "no aromatic ring next to the site"
        return "aromatic ring next to the site" if round(n) == 1 else f"{_count(n)} aromatic neighbour atoms"
    if key == "res_cn":
        n = v.get("res_cn_double", 0)
        return f"no C=N conjugated with {site}" if n == 0 else \
            f"{_plural(n, 'C=N', 'C=N groups')} conjugated with {site}"
    if key == "res_nitro":
        n = v.get("res_nitro", 0)
        return f"no nitro N on {site}" if n == 0 else f"nitro N bonded to {site}"
    if key == "res_cyano":
        n = v.get("res_cyano", 0)
        return f"no nitrile next to {site}" if n == 0 else f"{_plural(n, 'nitrile', 'nitriles')} next to {site}"
    if key == "res_vinyl":
        n = v.get("res_vinyl_co", 0)
        return "no vinylogous carbonyl (C=C-C=O)" if n == 0 else f"vinylogous carbonyl (C=C-C=O) on {site}"
    if key == "res_op_acceptor":
        n = v.get("res_op_acceptor", 0)
        return "no electron-withdrawing group ortho/para" if n == 0 else \
            f"{_plural(n, 'electron-withdrawing group', 'electron-withdrawing groups')} ortho/para"
    if key == "res_op_donor":
        n = v.get("res_op_donor", 0)
        return "no electron-donating group ortho/para" if n == 0 else \
            f"{_plural(n, 'electron-donating group', 'electron-donating groups')} ortho/para"
    if key == "res_op_aza":
        n = v.get("res_op_aza", 0)
        return "no ring N ortho/para to the site" if n == 0 else \
            f"{_plural(n, 'ring N', 'ring N atoms')} ortho/para to the site"
    if key == "res_total":
        n, o = v.get("res_total", 0), v.get("res_oxygen_partner_atoms", 0)
        if n == 0 and o == 0:
            return "no resonance partner for the charge"
        return f"charge spread over {int(n)} partner(s) and {int(o)} O atom(s)"
    if key.startswith("ind_") and key not in ("ind_en_sum", "ind_charge_sum"):
        cat = key[4:]
        one, many = _IND_NOUNS.get(cat, (cat, cat))
        by_d = {int(m.group(1)): val for name, val in v.items()
                if (m := re.fullmatch(rf"ind_d(\d+)_{re.escape(cat)}", name)) and val > 0}
        if not by_d:
            dmax = max((int(m.group(1)) for name in v if (m := re.fullmatch(r"ind_d(\d+)_\w+", name))), default=4)
            return f"no {one} within {dmax} bonds"
        total = sum(by_d.values())
        ds = sorted(by_d)
        where = (f"{ds[0]} bond{'s' if ds[0] > 1 else ''} away" if len(ds) == 1
                 else f"{ds[0]}-{ds[-1]} bonds away")
        return f"{_plural(total, one, many)} {where}"
    if key == "ind_en_sum":
        s = v.get("ind_en_sum", 0.0)
        if abs(s) < 1e-6:
            return "no electronegative atoms within 4 bonds"
        return f"electronegative atoms nearby (score {s:.2f})"
    if key == "ind_charge_sum":
        s = v.get("ind_charge_sum", 0.0)
        return "no other charged group" if abs(s) < 1e-6 else f"charged group elsewhere (field {s:+.2f})"
    if key == "chg":
        return f"partial charge of the site group, set by the electronegativity of its neighbours ({v.get('chg_group', 0.0):+.2f})"
    if key == "hb":
        if v.get("hb_ring6_7"):
            return "H-bond acceptor placed to close a 6/7-ring with the site"
        ds = [int(name[4:]) for name, val in v.items() if re.fullmatch(r"hb_d\d+", name) and val > 0]
        if not ds:
            return "no H-bond acceptor 2-5 bonds away"
        return f"H-bond acceptor {min(ds)} bonds away"
    if key == "ham":
        if np.isnan(v.get("ham_link", np.nan)):  # no six-membered aromatic ring within 3 bonds
            return "no six-membered aromatic ring within 3 bonds"
        return f"ring substituents, Hammett sigma (meta + para) {v.get('ham_sigma_mp', 0.0):+.2f}"
    if key in ("dl_ion", "dl_lp"):
        walk = key[3:]
        parts = [(v.get(f"dl_{walk}_{el}", 0.0), word) for el, word in
                 (("o", "O"), ("n", "N"), ("c", "C"), ("x", "other"))]
        total = sum(n for n, _ in parts)
        which = ", ".join(f"{_count(n)} {word}" for n, word in parts if n > 0)
        if walk == "ion":
            charge = "negative" if site.endswith("-H") else "positive"
            if not total:
                return f"the {charge} charge of the ionized site stays on it"
            return f"the {charge} charge of the ionized site spreads by resonance to {which}"
        if not total:
            return "the site's lone pair is not shared by resonance"
        return f"the site's lone pair is shared by resonance with {which}"
    return "other features"


def explain_sites_full(bundle, items) -> list[SiteExplanation | None]:
    """Every group's contribution for each ``(mol, atom, kind, site_type)`` item.

    ``None`` for an item whose kind has no model in the bundle.  For each explanation,
    ``sum(group contributions) + bias == prediction`` (LightGBM's additive contributions).
    """
    items = list(items)
    if not items:
        return []
    names = site_feature_names(bundle.settings, bundle.site_types)
    X = featurize_sites(items, bundle.settings, bundle.site_types)
    kinds = np.array([it[2] for it in items])
    contrib = bundle.regressor.predict(X, kinds, contrib=True)
    if contrib.shape[1] != len(names) + 1:
        raise ValueError(f"the model has {contrib.shape[1] - 1} feature columns but the bundle settings give "
                         f"{len(names)}; the bundle is inconsistent")
    groups = feature_groups(names)
    out: list[SiteExplanation | None] = []
    for row, (mol, atom, kind, site_type) in enumerate(items):
        c = contrib[row]
        if np.isnan(c).any():
            out.append(None)
            continue
        site = _site_label(mol, atom, kind)
        rows = []
        for key, cols in groups.items():
            values = {names[i]: float(X[row, i]) for i in cols} if key not in ("env", "mol") else {}
            rows.append((key, _phrase(key, values, site, site_type), float(c[cols].sum())))
        rows.sort(key=lambda t: -abs(t[2]))
        out.append(SiteExplanation(prediction=float(c.sum()), bias=float(c[-1]), groups=rows))
    return out


def explain_sites(bundle, items, top: int | None = 4) -> list[list[tuple[str, float]]]:
    """The ``top`` largest feature-group contributions per site as ``(phrase, log units)``.

    Sorted by absolute contribution, largest first; an empty list for a site whose
    kind has no model.  ``top=None`` gives every group.
    """
    return [[] if e is None else e.top(top) for e in explain_sites_full(bundle, items)]


def format_explanation(pairs) -> str:
    """``"phrase: +x.x; phrase: -y.y"``."""
    return "; ".join(f"{phrase}: {value:+.1f}" for phrase, value in pairs)
