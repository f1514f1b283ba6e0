"""Simulated panels for the Fleiss' kappa and AC1 coverage checks (benchmark and seeded test).

The data users have: a 1-7 scale with a ceiling (latent case level + a fixed offset per
rater + noise, shifted up so that many judgments pile up at 7, rounded and clipped), or
binary decisions (the same latent judgment above a cut), each case read by some of 6 raters.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.agreement.categories import category_counts, fleiss_kappa, gwet_ac1

N_RATERS = 6
OFFSETS = np.array([-0.6, -0.3, 0.0, 0.1, 0.4, 0.7])


def simulate(rng, n_cases, readers, binary):
    """One panel's first judgments (rater, case, judgment)."""
    level = rng.normal(size=n_cases)
    who = np.array([rng.choice(N_RATERS, size=readers, replace=False) for _ in range(n_cases)])
    cases = np.repeat(np.arange(n_cases), readers)
    raters = who.ravel()
    latent = 5.6 + 1.2 * level[cases] + OFFSETS[raters] + rng.normal(0, 0.8, size=cases.size)
    judgment = (latent > 6.0).astype(float) if binary else np.clip(np.round(latent), 1, 7)
    return pd.DataFrame({"rater": raters, "case": cases, "judgment": judgment})


def truth(readers, binary, *, seed=99, n_truth=400_000):
    """The coefficients' population values: both computed on ``n_truth`` simulated cases."""
    data = simulate(np.random.default_rng(seed), n_truth, readers, binary)
    counts, _ = category_counts(data["case"].to_numpy(), data["judgment"].to_numpy(),
                                categories=[0, 1] if binary else range(1, 8))
    return fleiss_kappa(counts), gwet_ac1(counts)
