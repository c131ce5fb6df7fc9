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
