"""Williams' T2 and Fisher's z for two correlations, against ``r.test`` of R's psych package.

psych is a general-purpose package for R (Revelle); it is not part of calibrate and is not
needed to run this file: the figures below are what R printed, copied by hand.

Source, as run on 2026-12-03: R's psych version 2.2.9 (Debian's ``r-cran-psych``), the
function ``r.test``, called as written beside each check and printed with
``print(..., digits = 8)``. psych's own code (``print(r.test)``) computes, for three
correlations r12, r13, r23 on the same n cases, Williams' T2 on n - 3 df,

    t2 = (r12 - r13) sqrt((n - 1)(1 + r23) / ((2 (n - 1)/(n - 3)) |R| + rbar^2 (1 - r23)^3)),

the statistic of Steiger (1980, eq. 7) that ``dependent_correlation_test`` computes (so the
same formula is compared, not a neighbouring one such as Steiger's Z), and for two
independent correlations z = |atanh r12 - atanh r34| / sqrt(1/(n - 3) + 1/(n2 - 3)) with
a two-sided normal p. (The help page's Details print the independent case's SE as
sqrt(1/((n_1)-3 + (n_2-3))); the code, and the figures below, use the sum of the two
reciprocals.)

What the help page (``?r.test``) says of the inputs: it prints "the correlations from
Steiger (1980), Table 1" (masculinity, femininity and verbal ability at two times,
n = 103) and calls ``r.test(103, .4, .5, .1)`` "Steiger case A of dependent correlations",
saying "t = -.89 for n = 103". So the help page attributes these inputs to Steiger (1980);
we could not read Steiger's paper here to confirm that his printed figure is the same.
(The help page's sentence describing case A names r12 = .5 and r13 = .4, the reverse of
its own call; the call and its table, M1-V1 = .40, F1-V1 = .50, M1-F1 = .10, agree, and the
call is what was run.) The n = 5105 example is on the help page without attribution (its
comment credits the precision example to a user); the other inputs are our own.
"""

import pytest

from calibrate.lens.model import dependent_correlation_test
from calibrate.training import fisher_z_difference

# (r12, r13, r23, n, t printed, p printed): r12 and r13 share variable 1; in our function's
# names r_jk = r12, r_jh = r13, r_kh = r23.
DEPENDENT = [
    # r.test(103, .4, .5, .1): help page, "Steiger case A of dependent correlations"
    # printed: "t value -0.8912799    with probability < 0.3749185"
    (0.4, 0.5, 0.1, 103, -0.8912799, 0.3749185),
    # r.test(n = 5105, r12 = 0.693458895410494, r23 = 0.988475791500198,
    #        r13 = 0.695966022434845): help page, precision example, no attribution
    # printed: "t value -1.644784    with probability < 0.1000759"
    (0.693458895410494, 0.695966022434845, 0.988475791500198, 5105, -1.644784, 0.1000759),
    # our own inputs: r.test(n = 40, r12 = .62, r13 = .45, r23 = .55)
    # printed: "t value 1.388452    with probability < 0.1733024"
    (0.62, 0.45, 0.55, 40, 1.388452, 0.1733024),
    # r.test(n = 25, r12 = .30, r13 = .55, r23 = .80)
    # printed: "t value -2.308749    with probability < 0.03073442"
    (0.30, 0.55, 0.80, 25, -2.308749, 0.03073442),
    # r.test(n = 120, r12 = .71, r13 = .68, r23 = .60)
    # printed: "t value 0.5605903    with probability < 0.5761488"
    (0.71, 0.68, 0.60, 120, 0.5605903, 0.5761488),
]

# (r1, n1, r2, n2, |z| printed, p printed): r.test(n = n1, r12 = r1, r34 = r2, n2 = n2)
INDEPENDENT = [
    # r.test(30, .4, .6): help page, "test the difference between two independent correlations"
    # printed: "z value 0.9901998    with probability  0.3220765"
    (0.4, 30, 0.6, 30, 0.9901998, 0.3220765),
    # r.test(n = 50, r12 = .82, r34 = .92, n2 = 60): the Guilford & Fruchter (1978, p. 164)
    # inputs of tests/reference/test_fisher_z_changes.py, run through psych
    # printed: "z value 2.193633    with probability  0.02826181"
    (0.82, 50, 0.92, 60, 2.193633, 0.02826181),
    # r.test(n = 78, r12 = .28, r34 = .71, n2 = 200): the Glass & Stanley (1970, p. 312) inputs
    # printed: "z value 4.418448    with probability  9.94e-06"
    (0.28, 78, 0.71, 200, 4.418448, 9.94e-06),
]


@pytest.mark.parametrize("r12, r13, r23, n, t_printed, p_printed", DEPENDENT)
def test_williams_t2_equals_psych_r_test(r12, r13, r23, n, t_printed, p_printed):
    t, df, p, low, high = dependent_correlation_test(r12, r13, r23, n)
    assert df == n - 3
    assert float(t) == pytest.approx(t_printed, abs=1e-6)  # printed to 7 significant digits
    assert float(p) == pytest.approx(p_printed, rel=1e-6)
    assert float(low) < r12 - r13 < float(high)


def test_steiger_case_a_as_the_help_page_words_it():
    # "t = -.89 for n = 103", the figure the help page prints in words
    t = float(dependent_correlation_test(0.4, 0.5, 0.1, 103)[0])
    assert round(t, 2) == -0.89


@pytest.mark.parametrize("r1, n1, r2, n2, z_printed, p_printed", INDEPENDENT)
def test_fisher_z_equals_psych_r_test(r1, n1, r2, n2, z_printed, p_printed):
    z, p, low, high = fisher_z_difference(r1, n1, r2, n2)
    assert abs(z) == pytest.approx(z_printed, abs=1e-6)  # psych prints |z|
    assert z > 0  # ours is signed: r2 - r1 is a rise here
    assert p == pytest.approx(p_printed, rel=1e-6 if p_printed > 1e-4 else 1e-3)
    assert low < r2 - r1 < high
