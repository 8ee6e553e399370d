"""Standard errors that allow for residuals correlated in time: the Newey-West
heteroskedasticity-and-autocorrelation-consistent (HAC) sandwich with Bartlett weights (Newey and West
1987, Econometrica 55(3), from memory; checked against statsmodels in tests), on scores summed over
both wheels of a sample and over short blocks of samples, and summed over logs (residuals of
different logs are independent).

Summing the scores over a block first is exact for the long-run variance and keeps the lag sum short:
a bench log at 1 kHz has residuals correlated over the filter window and the speed loop (~0.1 s) and,
where the model lacks a term, over whole motion segments (seconds).
"""

from __future__ import annotations

import numpy as np

BLOCK_S = 0.01  # scores summed over 10 ms blocks
LAGS_S = 1.0  # Bartlett window: correlations up to 1 s (5 s covered the truth less often on 20-s logs:
# a window that is a large part of the log makes the HAC estimate small)


def block_scores(x: np.ndarray, residual: np.ndarray, *, group: np.ndarray, time: np.ndarray, block: int) -> list:
    """Per group (log), the score sums x_i * r_i over each block of `block` consecutive samples, in time order."""
    g = x * residual[:, None]
    out = []
    for k in np.unique(group):
        mine = group == k
        b = time[mine] // block
        first = int(b.min())
        sums = np.zeros((int(b.max()) - first + 1, x.shape[1]))
        np.add.at(sums, b - first, g[mine])
        out.append(sums)
    return out


def long_run(scores: list, lags: int) -> np.ndarray:
    """Sum over groups of Gamma_0 + sum_l w_l (Gamma_l + Gamma_l^T), w_l = 1 - l/(lags+1) (Bartlett, the
    weights statsmodels' cov_hac uses)."""
    p = scores[0].shape[1]
    omega = np.zeros((p, p))
    for s in scores:
        omega += s.T @ s
        for lag in range(1, min(lags, len(s) - 1) + 1):
            gamma = s[lag:].T @ s[:-lag]
            omega += (1 - lag / (lags + 1)) * (gamma + gamma.T)
    return omega


def hac(
    x: np.ndarray, residual: np.ndarray, *, group: np.ndarray, time: np.ndarray, block: int, lags: int
) -> np.ndarray:
    """The HAC covariance of least-squares coefficients on columns x: (X^T X)^-1 Omega (X^T X)^-1, no
    small-sample factor (as statsmodels' OLS with cov_type="HAC")."""
    bread = np.linalg.pinv(x.T @ x)
    omega = long_run(block_scores(x, residual, group=group, time=time, block=block), lags)
    return np.asarray(bread @ omega @ bread)


def settings(period_s: float) -> tuple[int, int]:
    """(block in samples, lags in blocks) for a log of this sample period."""
    block = max(1, int(round(BLOCK_S / period_s)))
    return block, max(1, int(round(LAGS_S / (block * period_s))))
