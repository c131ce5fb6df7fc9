import numpy as np
import pytest

from pkasite.models.microstates import (fraction_neutral_form, fraction_protonated, macro_pkas, major_protonation,
                                        mean_charge)


def test_henderson_hasselbalch_half_ionized_at_pka():
    # Henderson-Hasselbalch: at pH = pKa the site is half protonated (general chemistry)
    assert fraction_protonated([4.76], 4.76)[0] == pytest.approx(0.5)
    assert mean_charge([4.76], ["acid"], 4.76) == pytest.approx(-0.5)
    assert mean_charge([9.0], ["base"], 8.0) == pytest.approx(10 / 11)


def test_two_identical_independent_sites_split_by_statistical_factor():
    # For two equivalent non-interacting sites the macroscopic constants differ by log10(4):
    # pK1 = pk - log10 2, pK2 = pk + log10 2 (statistical factor; e.g. Albert & Serjeant,
    # "The Determination of Ionization Constants", from memory).
    got = macro_pkas([5.0, 5.0])
    assert got == pytest.approx([5.0 - np.log10(2), 5.0 + np.log10(2)])


def test_well_separated_sites_keep_their_values():
    assert macro_pkas([9.6, 2.3]) == pytest.approx([2.3, 9.6], abs=1e-4)
    assert len(macro_pkas([])) == 0


def test_glycine_like_zwitterion_at_physiological_ph():
    # amino acid: acid 2.3, base 9.6 -> at pH 7.4 net charge ~0, neutral (uncharged) form negligible
    pka, kinds = [2.3, 9.6], ["acid", "base"]
    assert mean_charge(pka, kinds, 7.4) == pytest.approx(0.0, abs=0.01)
    assert fraction_neutral_form(pka, kinds, 7.4) < 1e-6
    assert list(major_protonation(pka, 7.4)) == [False, True]


# ----------------------------------------------------------------------------- interacting sites

from pkasite.models.microstates import (InteractionModel, Microstates, default_interaction_model,  # noqa: E402
                                        exclusive_pairs, read_calibration, site_holds)


def weak_sites(*args) -> np.ndarray:
    return site_holds(*args)[0]


def strong_sites(*args) -> np.ndarray:
    return site_holds(*args)[1]


def _pair(w: float) -> np.ndarray:
    return np.array([[0.0, w], [w, 0.0]])


def test_two_equivalent_interacting_sites_follow_the_electrostatic_relation():
    # Bjerrum (1923): for two equivalent groups pK2 - pK1 = log10(4) + W (statistical factor + interaction)
    for w in (0.0, 0.8, 2.5):
        pk, kinds = Microstates([4.5, 4.5], ["acid", "acid"], _pair(w)).macro_constants()
        assert pk[1] - pk[0] == pytest.approx(np.log10(4) + w, abs=1e-9) and list(kinds) == ["acid", "acid"]
        pk, kinds = Microstates([9.5, 9.5], ["base", "base"], _pair(w)).macro_constants()
        assert pk[1] - pk[0] == pytest.approx(np.log10(4) + w, abs=1e-9) and list(kinds) == ["base", "base"]


def test_opposite_charges_attract_and_steps_are_attributed_to_their_groups():
    # amino acid with an attraction W between COO- and NH3+: pK1 ~ acid site - W, pK2 ~ base site + W
    ms = Microstates([3.5, 8.5], ["acid", "base"], _pair(1.5))
    pk, kinds = ms.macro_constants()
    assert pk == pytest.approx([2.0, 10.0], abs=0.01) and list(kinds) == ["acid", "base"]
    assert ms.constant_of_kind("acid") == pytest.approx(2.0, abs=0.01)
    assert ms.constant_of_kind("base") == pytest.approx(10.0, abs=0.01)
    assert ms.mean_charge(6.0) == pytest.approx(0.0, abs=0.01) and ms.neutral_fraction(6.0) < 1e-3
    assert list(ms.major_protonation(6.0)) == [False, True]  # the zwitterion


def test_one_atom_never_gains_and_loses_a_proton_at_once():
    ex = exclusive_pairs(["acid", "base"], np.array([[0, 0], [0, 0]]))
    ms = Microstates([6.0, 8.0], ["acid", "base"], exclusive=ex)
    assert ms.populations(7.0)[(ms.q[:, 0] == -1) & (ms.q[:, 1] == 1)].sum() == 0.0
    # two sites one bond apart are not exclusive
    assert not exclusive_pairs(["acid", "base"], np.array([[0, 1], [1, 0]])).any()


def test_hydroxypyridine_charge_pair_stands_for_the_pyridone_tautomer():
    # 2-hydroxypyridine: constants 0.75 and 11.65 (Albert & Phillips, J. Chem. Soc. 1956, from memory);
    # mostly the neutral 2-pyridone at pH 7, which the charged O-/N-H+ pair of the site picture stands for
    ms = Microstates([0.75, 11.65], ["acid", "base"])
    assert ms.mean_charge(7.0) == pytest.approx(0.0, abs=0.01)


def test_weak_site_types_are_held_beside_ordinary_sites_of_their_kind():
    # serine-like: a carboxylic acid (prior 4.2) and an alcohol (prior 15.5, predicted too acidic at 8)
    assert list(weak_sites(["acid", "acid", "base"], [4.2, 15.5, 9.8], [2.2, 8.0, 9.2])) == [False, True, False]
    # a lone purine N-H predicted well inside the window stays free (adenine N9-H 9.8, CRC, from memory)
    assert list(weak_sites(["acid", "base"], [14.2, 6.5], [9.9, 4.2])) == [False, False]
    # a lone alcohol near the top of the window, or an amide O near the bottom, is held
    assert list(weak_sites(["acid"], [15.5], [12.2])) == [True]
    assert list(weak_sites(["base"], [-0.5], [1.5])) == [True]


def test_strong_site_types_are_held_charged_beside_ordinary_sites_of_their_kind():
    # 4-hydroxybenzenesulfonic acid: a sulfonic acid (prior -1.9) mispredicted at 4.9 beside a phenol
    # (prior 9.9); the sulfonic acid is no weak site, it is held as the anion (benzenesulfonic acid about
    # -2.8, Guthrie, Can. J. Chem. 1978; phenol of the sulfonate about 9.1, CRC; both from memory)
    kinds, priors, pka = ["acid", "acid"], [-1.9, 9.9], [4.9, 9.1]
    assert list(strong_sites(kinds, priors, pka)) == [True, False]
    assert list(weak_sites(kinds, priors, pka)) == [False, False]
    ms = Microstates(pka, kinds, hold=weak_sites(kinds, priors, pka), hold_charged=strong_sites(kinds, priors, pka))
    # one constant in the window, the phenol's; charge -1 at pH 7.4 and no neutral form
    assert ms.macro_constants()[0] == pytest.approx([9.1])
    assert ms.mean_charge(7.4) == pytest.approx(-1.0, abs=0.02)
    assert ms.neutral_fraction(7.4) == 0.0
    # its charge still acts on the phenol through the pair term
    W = _pair(0.5)
    pulled = Microstates(pka, kinds, W, hold_charged=np.array([True, False]))
    assert pulled.macro_constants()[0] == pytest.approx([9.6])
    # a lone sulfonic acid predicted near the bottom of the window is held; a protonated-amine-like
    # strong base (prior above the window) likewise, on its own side
    assert list(strong_sites(["acid"], [-1.9], [-1.0])) == [True]
    assert list(strong_sites(["acid"], [-1.9], [5.0])) == [False]
    assert list(strong_sites(["base"], [14.5], [12.5])) == [True]
    # weak-side types are never held charged
    assert list(strong_sites(["acid", "acid", "base"], [4.2, 15.5, -0.5], [2.2, 8.0, 1.5])) == [False, False, False]


def test_many_sites_hold_the_farthest_ones_and_keep_their_charge():
    pka = np.array([4.0, 4.5, 5.0, 5.5, 6.0, 6.5, 7.0, 7.5, 8.0, 8.5, 9.0, 9.5, -3.0, 17.0])
    ms = Microstates(pka, np.full(14, "acid"))
    assert sorted(ms.held) == [12, 13] and len(ms.free) == 12
    # the strong acid held deprotonated still counts in the charge; the weak one held protonated does not
    free_charge = Microstates(pka[:12], np.full(12, "acid")).mean_charge(7.0)
    assert ms.mean_charge(7.0) == pytest.approx(free_charge - 1.0)


def test_interaction_model_is_fitted_on_its_calibration_set():
    from importlib import resources
    rows = read_calibration(resources.files("pkasite.configs").joinpath("site_interactions.csv").read_text())
    assert len(rows) >= 6 and all(r["source"] for r in rows)
    model = default_interaction_model()
    assert model.n_calibration == len(rows) and 1.0 < model.power < 4.0 and model.conjugated_factor > 1.0
    # the fitted curve reproduces the non-conjugated calibration pairs within a factor of two
    for r in rows:
        w = abs(float(r["pk2"]) - float(r["pk1"])) - np.log10(float(r["statistical_factor"]))
        fit = float(model.pair(float(r["distance"]), r["conjugated"] == "1", float(r["paths"])))
        assert 0.5 < fit / w < 2.0, r["name"]
    # the pair term falls with distance and never exceeds the largest calibration value
    d = np.arange(1, 10)
    w = model.pair(d, np.zeros(9, bool))
    assert np.all(np.diff(w) <= 0) and w.max() <= model.cap + 1e-9
    again = InteractionModel.from_dict(model.to_dict())
    assert again == model


def test_calibration_rows_match_their_molecules():
    """The distance, conjugation and path count written in the calibration file are those the model
    computes for the molecule's two like sites (one hand-kept number per row could drift)."""
    from importlib import resources
    from rdkit import Chem
    from pkasite.features.site_pairs import pair_geometry, shortest_path_counts
    from pkasite.features.sites import find_sites
    rows = read_calibration(resources.files("pkasite.configs").joinpath("site_interactions.csv").read_text())
    for r in rows:
        mol = Chem.MolFromSmiles(r["smiles"])
        sites = [s for s in find_sites(mol) if s.kind == r["kind"]]
        types = [s.type for s in sites]
        atoms = [s.atom for s in sites if types.count(s.type) == 2]  # the two like groups (not malonic C-H)
        assert len(atoms) == 2, r["name"]
        d, conj = pair_geometry(mol, atoms)
        paths = shortest_path_counts(mol, atoms)
        assert (d[0, 1], bool(conj[0, 1]), paths[0, 1]) == (float(r["distance"]), r["conjugated"] == "1",
                                                           float(r["paths"])), r["name"]


@pytest.mark.parametrize("smiles, expected", [
    ("NCCN", 1),                # ethylenediamine: one chain
    ("C1CNCCN1", 2),            # piperazine: both sides of the ring
    ("C1CN2CCN1CC2", 3),        # 1,4-diazabicyclo[2.2.2]octane: three bridges
    ("c1cnccn1", 2),            # pyrazine
    ("c1cncnc1", 1),            # pyrimidine: N1-C2-N3 is shorter than the way round
    ("C1CCNCCN1", 1),           # 1,4-diazepane: 3 bonds one way, 4 the other
    ("N.N", 0),                 # two molecules: no path
])
def test_shortest_path_counts(smiles, expected):
    from rdkit import Chem
    from pkasite.features.site_pairs import shortest_path_counts
    mol = Chem.MolFromSmiles(smiles)
    atoms = [a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == "N"]
    counts = shortest_path_counts(mol, atoms)
    assert counts[0, 1] == counts[1, 0] == expected and counts[0, 0] == 0


def test_several_paths_strengthen_the_pair_term():
    """Ring diamines: two equivalent amines 3 bonds apart interact more when more bridges join them.
    Handbook second constants (CRC Handbook, from memory; none is in the calibration set): ethylenediamine
    9.93 / 6.85 (one path), piperazine 9.73 / 5.35 (two), 1,4-diazabicyclo[2.2.2]octane 8.82 / 2.97
    (three).  The interaction W = pK1 - pK2 - log10(4) then grows 2.5, 3.8, 5.3; the model's pair term
    must follow within 1 pK unit and keep that order."""
    model = default_interaction_model()
    assert model.path_factor > 0
    got = [float(model.pair(3.0, False, n)) for n in (1, 2, 3)]
    handbook = [9.93 - 6.85 - np.log10(4), 9.73 - 5.35 - np.log10(4), 8.82 - 2.97 - np.log10(4)]
    assert got == pytest.approx(handbook, abs=1.0)
    assert got[0] < got[1] < got[2]
    # a model written before the path count existed reads as one path
    old = InteractionModel.from_dict({k: v for k, v in model.to_dict().items() if k != "path_factor"})
    assert float(old.pair(3.0, False, 3)) == pytest.approx(float(old.pair(3.0, False, 1)))


def test_weak_sites_are_held_uncharged_whatever_their_prediction():
    # citric acid (CRC, from memory: 3.13, 4.76, 6.40) with its tertiary alcohol predicted far too acidic:
    # held, the alcohol must neither titrate nor push the carboxylic acids with a charge
    pka = [3.4, 4.0, 4.0, 6.9]
    kinds = ["acid"] * 4
    hold = np.array([False, False, False, True])
    ms = Microstates(pka, kinds, hold=hold)
    free = Microstates(pka[:3], kinds[:3])
    assert ms.macro_constants()[0] == pytest.approx(free.macro_constants()[0])
    assert ms.mean_charge(7.4) == pytest.approx(free.mean_charge(7.4))


def test_sites_whose_charges_share_an_atom_get_the_strongest_pair_term():
    """A biguanide's two imine N share the amino N between their carbons: protonating both puts two
    positive charges partly on that one N. Common practice: biguanides take one proton in water, the
    second only in strong acid. Pairs that only sit 4 bonds apart (1,4-diaminobutane-like) stay on the
    distance law, and an acid-base pair is never given the like-charge term."""
    from rdkit import Chem
    from pkasite.features.site_pairs import pair_geometry, shared_charge_pairs
    model = default_interaction_model()
    metformin = Chem.MolFromSmiles("CN(C)C(=N)NC(=N)N")  # imine N at atoms 4 and 7
    shared = shared_charge_pairs(metformin, [4, 7])
    assert shared.tolist() == [[False, True], [True, False]]
    d, conj = pair_geometry(metformin, [4, 7])
    W = model.matrix(d, conj, np.array(["base", "base"]), shared)
    assert W[0, 1] == pytest.approx(model.cap) and W[0, 1] > 3 * float(model.pair(4.0, False))
    assert model.matrix(d, conj, np.array(["base", "acid"]), shared)[0, 1] == 0.0
    amine = Chem.MolFromSmiles("NCCCN")
    assert not shared_charge_pairs(amine, [0, 4]).any()
    # an amidine's imine N and its own amino N take up one charge between them
    amidine = Chem.MolFromSmiles("CC(=N)N")
    assert shared_charge_pairs(amidine, [2, 3]).tolist() == [[False, True], [True, False]]


def test_the_step_out_of_a_charge_is_named_by_that_charge_whatever_its_sites():
    # 3-hydroxypyridine: pyridinium 4.79 and OH 8.75 (Albert & Phillips, J. Chem. Soc. 1956; from memory)
    ms = Microstates([8.75, 4.79], ["acid", "base"])
    # the cation (+1) gives up its first proton at the pyridinium's constant, the neutral molecule (0)
    # its next one at the phenol's, although the first step is a base step and the second an acid step
    assert ms.constant_at_charge(1) == pytest.approx(4.79, abs=0.01)
    assert ms.constant_at_charge(0) == pytest.approx(8.75, abs=0.01)
    assert ms.constant_of_kind("acid") == pytest.approx(ms.constant_at_charge(0))
    # no species of charge +2 or -1 loses a proton
    assert np.isnan(ms.constant_at_charge(2)) and np.isnan(ms.constant_at_charge(-1))
    # an amino acid with a pair term: the cation's step is the carboxylic acid's, pulled down by the attraction
    aa = Microstates([3.5, 8.5], ["acid", "base"], _pair(1.5))
    assert aa.constant_at_charge(1) == pytest.approx(aa.constant_of_kind("acid"))
    assert aa.constant_at_charge(0) == pytest.approx(aa.constant_of_kind("base"))


def test_the_step_out_of_a_charge_counts_held_sites_in_their_held_form():
    # a sulfonate held as the anion beside an amine (taurine-like: amine 9.1, CRC, from memory): the
    # species of site charge 0 is the zwitterion, whose step is the amine's
    ms = Microstates([-1.5, 9.1], ["acid", "base"], hold_charged=np.array([True, False]))
    assert ms.constant_at_charge(0) == pytest.approx(9.1)
    assert np.isnan(ms.constant_at_charge(1))


@pytest.mark.parametrize("name,smiles,pairs", [
    # a ring O-H or S-H ortho or para to a ring N of one six-membered ring: a lactim
    ("2-hydroxypyridine", "Oc1ccccn1", {(0, 6)}),
    ("4-hydroxypyridine", "Oc1ccncc1", {(0, 4)}),
    ("pyridine-2-thiol", "Sc1ccccn1", {(0, 6)}),
    ("2-hydroxypyrimidine", "Oc1ncccn1", {(0, 2), (0, 6)}),
    # meta, across a ring fusion, or not on the ring: no lactim
    ("3-hydroxypyridine", "Oc1cccnc1", set()),
    ("8-hydroxyquinoline", "Oc1cccc2cccnc12", set()),
    ("picolinic acid", "O=C(O)c1ccccn1", set()),
])
def test_lactim_pairs(name, smiles, pairs):
    from rdkit import Chem

    from pkasite.features.site_pairs import lactim_pairs
    from pkasite.features.sites import find_sites
    mol = Chem.MolFromSmiles(smiles)
    sites = find_sites(mol)
    atoms = [s.atom for s in sites]
    T = lactim_pairs(mol, atoms, [s.kind for s in sites])
    assert (T == T.T).all(), name
    assert {(atoms[i], atoms[j]) for i, j in zip(*np.nonzero(T)) if i < j} == pairs, name


def test_a_lactim_pair_is_neutral_as_the_lactam():
    """2-hydroxypyridine is 2-pyridone in water: protonation 0.75, N-H 11.65 (Albert & Phillips 1956, from
    memory).  In the site picture the O- / N-H+ pair is the lactam, so between the two constants the
    molecule is neutral, not a zwitterion; an amino acid's charged pair stays a zwitterion."""
    T = np.array([[False, True], [True, False]])
    ms = Microstates([0.75, 11.65], ["acid", "base"], tautomer=T)
    assert ms.neutral_fraction(7.0) == pytest.approx(1.0, abs=1e-3)
    plain = Microstates([0.75, 11.65], ["acid", "base"])
    assert plain.neutral_fraction(7.0) < 1e-6
    # populations, charges, constants and their kinds do not depend on the pair
    assert ms.mean_charge(7.0) == pytest.approx(plain.mean_charge(7.0))
    assert ms.macro_constants()[0] == pytest.approx(plain.macro_constants()[0])
    assert list(ms.macro_constants()[1]) == list(plain.macro_constants()[1]) == ["acid", "base"]
    # outside the pair's range the charged species count as charged
    assert ms.neutral_fraction(0.75) == pytest.approx(0.5, abs=0.01)


def _amine_chain(n: int):
    """Site pKa and pair matrix of a linear chain of ``n`` amines two carbons apart (an oligo-
    ethyleneimine): end amines 10.0, inner 9.5, pair terms from the packaged interaction model."""
    from pkasite.models.microstates import default_interaction_model
    d = 3.0 * np.abs(np.arange(n)[:, None] - np.arange(n)[None, :])
    kinds = np.full(n, "base")
    pka = np.full(n, 9.5)
    pka[[0, -1]] = 10.0
    return pka, kinds, default_interaction_model().matrix(d, np.zeros((n, n), bool), kinds=kinds)


def test_sites_beyond_the_exact_set_follow_exact_enumeration_by_mean_field(monkeypatch):
    # reference: exact enumeration of all 4,096 microstates of the same 12 sites; with only 6 enumerated
    # and 6 by mean field the charge follows it across the titration
    import pkasite.models.microstates as ms_mod
    pka, kinds, W = _amine_chain(12)
    exact = Microstates(pka, kinds, W)
    assert not exact.held
    monkeypatch.setattr(ms_mod, "MAX_EXACT_SITES", 6)
    approx = ms_mod.Microstates(pka, kinds, W, ph_ref=7.4)
    assert len(approx.held) == 6 and len(approx.mean_field) == 6
    for ph in (3.0, 5.0, 7.4, 9.0, 11.0):
        assert approx.mean_charge(ph) == pytest.approx(exact.mean_charge(ph), abs=0.25), ph
    # the held sites are not all counted protonated, as a fixed dominant form at pH 7.4 would count them
    assert approx.held_charges(7.4)[approx.held].sum() < 5.0
    assert approx.neutral_fraction(7.4) == pytest.approx(exact.neutral_fraction(7.4), abs=1e-6)
    # a mean-field site counts as protonated in the major form when it is bound more than half the time
    assert approx.major_protonation(2.0).all() and not approx.major_protonation(12.0).any()


def test_long_polyamine_charge_per_amine_does_not_grow_with_length():
    # Before the mean field, sites beyond 12 were held protonated at pH 7.4, so a 40-amine chain came out
    # +31 (0.78 per amine).  The charge per site of a uniform chain levels off with length (only the ends
    # differ); linear poly(ethyleneimine) is roughly half protonated or less near neutral pH (M. Borkovec
    # and G. J. M. Koper, titrations of linear PEI, from memory)
    pka12, kinds12, W12 = _amine_chain(12)
    per12 = Microstates(pka12, kinds12, W12).mean_charge(7.4) / 12
    pka40, kinds40, W40 = _amine_chain(40)
    long_chain = Microstates(pka40, kinds40, W40, ph_ref=7.4)
    per40 = long_chain.mean_charge(7.4) / 40
    assert len(long_chain.held) == 28
    assert 0.3 < per40 < 0.55 and per40 == pytest.approx(per12, abs=0.06)
    # the charge still falls with pH, and the isoelectric search needs no acid here
    curve = long_chain.mean_charge_curve(np.array([4.0, 7.4, 10.0]))
    assert curve[0] > curve[1] > curve[2] and curve[1] == pytest.approx(long_chain.mean_charge(7.4))
