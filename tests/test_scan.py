"""The Keplerian periodogram against the marginal likelihood computed without its shortcuts.

Reference: scipy.stats.multivariate_normal on the full n x n covariance
C + X Lambda X^T of the linear parameters (the definition of the marginal likelihood in
docs/priors.md), with the design X built from the project's Kepler solver at each grid point.
The scan's whitening, closed-form 2 x 2 solve and tabulated orbit shapes must reproduce it.
"""

import numpy as np
import pytest
from scipy.special import logsumexp
from scipy.stats import multivariate_normal

from inference.kepler import eccentric_anomaly_sincos
from inference.scan import keplerian_scores


def _reference(t, var, resid, fixed, fixed_prec, amp_prec, freq, grid):
    lls = []
    for e, n_phase in grid:
        for m0 in 2 * np.pi * np.arange(n_phase) / n_phase:
            _, sin_e, cos_e = eccentric_anomaly_sincos(2 * np.pi * freq * t + m0, e)
            inv = 1.0 / (1.0 - e * cos_e)
            x = np.column_stack([(cos_e - e) * inv + e, -np.sqrt(1 - e * e) * sin_e * inv, fixed])
            lam = np.concatenate([[1 / amp_prec] * 2, 1 / fixed_prec])
            cov = np.diag(var) + (x * lam) @ x.T
            lls.append(multivariate_normal(np.zeros(t.size), cov).logpdf(resid))
    lls = np.array(lls)
    return logsumexp(lls) - np.log(lls.size), lls.max()


def test_scores_match_the_full_covariance_marginal_likelihood():
    rng = np.random.default_rng(3)
    t = np.sort(rng.uniform(-200, 200, 14))
    var = rng.uniform(1.0, 4.0, t.size)
    fixed = np.column_stack([np.ones(t.size), t / 100])  # an offset and a trend column
    resid = 8 * np.cos(2 * np.pi * t / 37.0 + 0.4) + rng.normal(0, 2, t.size)
    grid = ((0.3, 12), (0.7, 16))
    freqs = np.array([1 / 37.0, 1 / 80.0, 1 / 5.3])
    score, best, best_ll = keplerian_scores(t, 1 / var, resid, fixed, np.array([1e-3, 1e-2]),
                                            1 / 30.0**2, freqs, top=1, grid=grid)
    for k, f in enumerate(freqs):
        mean_ref, max_ref = _reference(t, var, resid, fixed, np.array([1e-3, 1e-2]),
                                       1 / 30.0**2, f, grid)
        # The orbit shape is tabulated at 4096 mean anomalies (nearest entry): a phase error
        # of at most pi / 4096, so agreement to about 0.05 ln units.
        assert score[k] == pytest.approx(mean_ref, abs=0.05)
        assert best_ll[k, 0] == pytest.approx(max_ref, abs=0.05)
    assert np.argmax(score) == 0  # the injected 37 d signal scores best
    assert best.shape == (3, 1, 2)
