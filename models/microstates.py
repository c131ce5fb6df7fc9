"""From site (microscopic) pKa values to macroscopic constants, charge and species populations.

Sites are treated as independent: each site is protonated with probability
``1 / (1 + 10**(pH - pKa))``.  Under that model the microstate populations
factorize, the binding polynomial is ``prod_i (1 + h / K_i)`` with ``h = [H+]``
and ``K_i = 10**-pKa_i``, and the macroscopic stepwise constants are ratios of
its coefficients (the sums over microstates holding the same number of protons).
Site-site interactions (a second carboxylate made weaker by the first) are not
modelled; that is a known limitation, stated in the model card.
"""
from __future__ import annotations

import numpy as np


def fraction_protonated(pka: np.ndarray, ph: float) -> np.ndarray:
    return 1.0 / (1.0 + 10.0 ** (ph - np.asarray(pka, float)))


def macro_pkas(pka: np.ndarray) -> np.ndarray:
    """Macroscopic pKa values, ascending, from independent site pKa values.

    With ``n`` sites, the coefficient ``b_k`` of ``h**k`` in the binding polynomial is the
    sum over microstates with ``k`` bound protons; the k-th macroscopic constant (counting
    from the most protonated end) is ``log10(b_k / b_(k-1))``.
    """
    pka = np.sort(np.asarray(pka, float))
    n = len(pka)
    if n == 0:
        return pka
    # polynomial in h scaled by 10**pka to stay in floating range: prod (1 + h * 10**pka_i)
    # work in log space with coefficients of x = h: c_k = e_k(10**pka) (elementary symmetric)
    logc = np.full(n + 1, -np.inf)
    logc[0] = 0.0
    for p in pka:  # multiply by (1 + 10**p x) in log10 space
        shifted = np.concatenate([[-np.inf], logc[:-1] + p])
        logc = np.logaddexp(logc * np.log(10), shifted * np.log(10)) / np.log(10)
    return np.sort(logc[1:] - logc[:-1])


def mean_charge(pka: np.ndarray, kinds: np.ndarray, ph: float, base_charge: float = 0.0) -> float:
    """Population-weighted net charge: acids lose -1 when deprotonated, bases gain +1 when protonated."""
    f = fraction_protonated(pka, ph)
    kinds = np.asarray(kinds)
    return float(base_charge + np.sum(np.where(kinds == "base", f, f - 1.0)))


def fraction_neutral_form(pka: np.ndarray, kinds: np.ndarray, ph: float) -> float:
    """Population of the microstate with every site in its uncharged form (acids on, bases off)."""
    f = fraction_protonated(pka, ph)
    kinds = np.asarray(kinds)
    return float(np.prod(np.where(kinds == "acid", f, 1.0 - f)))


def major_protonation(pka: np.ndarray, ph: float) -> np.ndarray:
    """Per site, whether it carries the proton in the most populated microstate."""
    return np.asarray(pka, float) > ph
