"""One-visit bits given executed visits whose velocities are not known yet, in milliseconds.

At the telescope a re-plan keeps the visits already executed; until their velocities are
reduced, a later visit of the same star is worth its gain *given* those visits, outcomes
unknown: ``I(t | S) = I(S + t) - I(S)``. The exact Monte Carlo value
(:func:`planner.information.gain.conditional_bits`) costs one mixture entropy per simulated
outcome and grid time, minutes over a whole run. Here the exact one-visit curve, which a re-plan
already has, is scaled by the linear-Gaussian share of it that survives the executed visits:

    b(t | S) = b(t) * I_G(t | S) / I_G(t),
    I_G(t) = 0.5 log2(1 + c_tt / N_t),
    I_G(t | S) = 0.5 log2(1 + (c_tt - c_tS (C_SS + N_S)^-1 c_St) / N_t),

with ``C`` the sample covariance of the predicted velocities and ``N`` the noise variance
(measurement and mean jitter). Both ratios are exact for a linear-Gaussian model (Lindley 1956,
the information of a linear-Gaussian measurement), the same rescaling the surrogate uses for its
Gaussian patterns (:mod:`planner.allocation.surrogate`). For a posterior far from Gaussian
(several period modes) the Gaussian share keeps too much: measured on the demo, a star worth 4.3
bits a visit kept 71 % where the exact conditional kept 38 %. :func:`calibrate_share` therefore
scales the share each star loses by the exact loss at a few of its times (the exact Monte Carlo
value there), as the surrogate calibrates its Gaussian patterns on one exact pattern. The value
of a plan is still scored exactly (:mod:`planner.workflow.plan_file` conditions on the
executed visits by Monte Carlo); these bits only steer the strategies.
"""

from __future__ import annotations

import numpy as np

from planner.information.entropy import InformationError

__all__ = ["calibrate_share", "gaussian_share", "pending_bits"]


def gaussian_share(predicted_set, noise_var_set, predicted_new, noise_var_new) -> np.ndarray:
    """Share of each new visit's linear-Gaussian information left given a set of visits.

    Parameters
    ----------
    predicted_set : ndarray, shape (n_samples, n_set)
        Predicted velocities at the executed visits [m/s].
    noise_var_set : ndarray, shape (n_set,)
        Noise variance of the executed visits (measurement and mean jitter) [m^2/s^2].
    predicted_new : ndarray, shape (n_samples, n_times)
        Predicted velocities at the candidate times [m/s].
    noise_var_new : ndarray, shape (n_times,)
        Noise variance of the candidates [m^2/s^2].

    Returns
    -------
    ndarray, shape (n_times,)
        ``I_G(t | S) / I_G(t)`` in [0, 1]; 1 where the prediction does not vary (nothing to
        share), and 1 for every time when the set is empty.
    """
    vs = np.asarray(predicted_set, dtype=float)
    vn = np.asarray(predicted_new, dtype=float)
    ns = np.asarray(noise_var_set, dtype=float).reshape(-1)
    nn = np.asarray(noise_var_new, dtype=float).reshape(-1)
    if vs.ndim != 2 or vn.ndim != 2 or vs.shape[0] != vn.shape[0]:
        raise InformationError("predicted_set and predicted_new must be (n_samples, n) arrays "
                               "from the same posterior samples.")
    if ns.size != vs.shape[1] or nn.size != vn.shape[1]:
        raise InformationError("give one noise variance per visit and per candidate time.")
    if np.any(~(ns > 0)) or np.any(~(nn > 0)):
        raise InformationError("noise variances must be positive; add the jitter and the "
                               "measurement noise.")
    if vs.shape[1] == 0 or vn.shape[1] == 0:
        return np.ones(vn.shape[1])
    n = vs.shape[0]
    cs = vs - vs.mean(axis=0)
    cn = vn - vn.mean(axis=0)
    c_ss = cs.T @ cs / n + np.diag(ns)
    c_sn = cs.T @ cn / n
    c_nn = np.einsum("ij,ij->j", cn, cn) / n
    reduced = c_nn - np.einsum("ij,ij->j", c_sn, np.linalg.solve(c_ss, c_sn))
    before = np.log1p(c_nn / nn)
    after = np.log1p(np.maximum(reduced, 0.0) / nn)
    share = np.ones(vn.shape[1])
    varies = before > 1e-12
    share[varies] = after[varies] / before[varies]
    return np.clip(share, 0.0, 1.0)


def pending_bits(bits, predicted_set, noise_var_set, predicted_new, noise_var_new) -> np.ndarray:
    """One-visit bits given executed visits without velocities (module notes).

    Parameters
    ----------
    bits : ndarray, shape (n_times,)
        Exact one-visit bits at the candidate times, ignoring the executed visits [bit].
    predicted_set, noise_var_set, predicted_new, noise_var_new
        As in :func:`gaussian_share`.

    Returns
    -------
    ndarray, shape (n_times,)
        ``bits`` times the linear-Gaussian share left [bit], never above ``bits``.
    """
    share = gaussian_share(predicted_set, noise_var_set, predicted_new, noise_var_new)
    return np.asarray(bits, dtype=float) * share


def calibrate_share(share, share_at, exact_at) -> np.ndarray:
    """Scale the share lost to the executed visits by its exact value at a few times.

    Parameters
    ----------
    share : ndarray, shape (n_times,)
        Linear-Gaussian shares left (:func:`gaussian_share`).
    share_at : ndarray, shape (n_cal,)
        The same at the calibration times.
    exact_at : ndarray, shape (n_cal,)
        Exact shares left there: exact conditional bits over exact one-visit bits.

    Returns
    -------
    ndarray, shape (n_times,)
        ``1 - c (1 - share)``, clipped to [0, 1], with ``c = sum(1 - exact_at) /
        sum(1 - share_at)`` (1 when the Gaussian loses nothing there).
    """
    share = np.asarray(share, dtype=float)
    lost = float(np.sum(1.0 - np.asarray(share_at, dtype=float)))
    if lost <= 1e-9:
        return share.copy()
    c = max(float(np.sum(1.0 - np.clip(np.asarray(exact_at, dtype=float), 0.0, 1.0))), 0.0)
    return np.clip(1.0 - (c / lost) * (1.0 - share), 0.0, 1.0)
