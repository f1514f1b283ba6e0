"""Gwet's AC1 computed outside calibrate, for the reference and unit tests.

Two routes, neither calling calibrate.agreement.categories:

``ac1_from_statsmodels`` (the same number of readers on every case). statsmodels'
``fleiss_kappa`` gives Fleiss' kappa, and with ``method="randolph"`` the
Brennan-Prediger/Randolph coefficient; both read the observed agreement p_a and
(kappa) the category proportions pi_k from the table themselves. Writing
S = sum_k pi_k^2:

    BP    = (p_a - 1/q) / (1 - 1/q)         =>  p_a = 1/q + (1 - 1/q) BP
    kappa = (p_a - S) / (1 - S)             =>  S   = (p_a - kappa) / (1 - kappa)
    sum_k pi_k (1 - pi_k) = sum_k pi_k - S = 1 - S   (the pi_k sum to 1)

so AC1's chance term p_e = sum_k pi_k (1 - pi_k) / (q - 1) = (1 - S) / (q - 1) and
AC1 = (p_a - p_e) / (1 - p_e) follow from statsmodels' two numbers alone. The three
lines are exact algebra; what rests on the written definition is only the last step,
AC1's form and chance term as Gwet (2008, Br. J. Math. Stat. Psychol. 61:29-48)
defines them and the module docstring writes them. Undefined where kappa = 1.

``two_rater_ac1`` is Gwet's (2008) two-rater AC1 from a q x q table of counts
(rows: one reader, columns: the other): p_a = sum_k p_kk,
pi_k = (p_k+ + p_+k) / 2, the same chance term. With two readers per case the
multi-reader counting form reduces to it (a case's agreement share
r_ik (r_ik - 1) / (r_i (r_i - 1)) is 1 when both readers chose k, else 0, and its
share r_ik / r_i is the mean of the two readers' indicators), whichever two raters
read the case and in whichever order they are put in the table.
"""

from __future__ import annotations

import numpy as np
from statsmodels.stats.inter_rater import fleiss_kappa


def ac1_from_statsmodels(table) -> float:
    """AC1 of a (cases x categories) count table with equal readers, from statsmodels' kappas."""
    table = np.asarray(table, dtype=float)
    q = table.shape[1]
    brennan_prediger = fleiss_kappa(table, method="randolph")
    kappa = fleiss_kappa(table, method="fleiss")
    p_a = 1.0 / q + (1.0 - 1.0 / q) * brennan_prediger
    sum_squares = (p_a - kappa) / (1.0 - kappa)
    p_e = (1.0 - sum_squares) / (q - 1.0)
    return (p_a - p_e) / (1.0 - p_e)


def two_rater_ac1(square) -> float:
    """Gwet's (2008) two-rater AC1 from a q x q table of counts (or proportions)."""
    square = np.asarray(square, dtype=float)
    p = square / square.sum()
    q = p.shape[0]
    p_a = np.trace(p)
    pi = (p.sum(axis=1) + p.sum(axis=0)) / 2.0
    p_e = (pi * (1.0 - pi)).sum() / (q - 1.0)
    return (p_a - p_e) / (1.0 - p_e)
