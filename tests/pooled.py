"""Pooled statistics over the nodes of a simulated grid, with their sampling law.

Checking each node at 4.5 standard errors lets a small systematic error through: a 10 %
variance deficit at every node is under 4.5 standard errors of one node's variance for
a few thousand realizations.  Pooling the nodes shrinks the sampling error, but the nodes
are correlated, so the standard error must come from the law the realizations should
follow (the conditional covariance ``S`` of the nodes), not from a count of nodes:

* sample variances (divisor R - 1) of jointly normal values have
  ``Cov(s_i^2, s_j^2) = 2 S_ij^2 / (R - 1)`` (the Wishart second moments; e.g. Anderson
  2003, An Introduction to Multivariate Statistical Analysis, 3rd ed., section 7.3; from
  memory), so the mean over N nodes of ``s_i^2 / S_ii`` has expectation 1 and variance
  ``2 / (R - 1) * mean_ij(rho_ij^2)``, rho the conditional correlation;
* with the covariance known, ``R (xbar - mu)' S^-1 (xbar - mu)`` is chi-square with N
  degrees of freedom (Anderson 2003, section 5.2; from memory);
* whitened by the law, ``sum_r (x_r - mu)' S^-1 (x_r - mu)`` is chi-square with R N
  degrees of freedom: divided by R N it has mean 1 and standard error sqrt(2 / (R N)),
  whatever the correlation between nodes (same source).
"""
import numpy as np
from scipy import stats


def variance_ratio(samples, variance, correlation):
    """Mean over nodes of sample variance / expected variance, and its standard error.

    ``samples`` is (R, N): R independent realizations of N nodes.
    """
    r = samples.shape[0]
    ratio = float(np.mean(samples.var(axis=0, ddof=1) / variance))
    return ratio, float(np.sqrt(2.0 / (r - 1) * np.mean(correlation ** 2)))


def mean_chi_square(samples, mean, covariance):
    """``R (xbar - mu)' S^-1 (xbar - mu)`` and its upper-tail probability (chi-square, N dof)."""
    r, n = samples.shape
    d = samples.mean(axis=0) - mean
    q = float(r * d @ np.linalg.solve(covariance, d))
    return q, float(stats.chi2.sf(q, n))


def whitened_variance(samples, mean, covariance):
    """``sum_r (x_r - mu)' S^-1 (x_r - mu) / (R N)`` and its standard error sqrt(2 / (R N))."""
    r, n = samples.shape
    d = samples - mean
    q = float(np.sum(d * np.linalg.solve(covariance, d.T).T))
    return q / (r * n), float(np.sqrt(2.0 / (r * n)))


def power(shift, se, z):
    """Chance that a two-sided test at ``z`` standard errors sees a systematic ``shift``."""
    return float(stats.norm.sf(z - shift / se) + stats.norm.cdf(-z - shift / se))


def correlation(cov):
    sd = np.sqrt(np.diag(cov))
    return cov / np.outer(sd, sd)


def simple_kriging_law(model_cov, data, scores, nodes):
    """Mean and covariance of the nodes given the data under simple kriging (mean 0).

    ``model_cov(a, b)`` gives covariance matrices (use tests/independent.py's).
    """
    k = model_cov(data, data)
    c = model_cov(data, nodes)
    w = np.linalg.solve(k, c)
    return w.T @ scores, model_cov(nodes, nodes) - c.T @ w


def ordinary_kriging_law(model_cov, data, scores, nodes):
    """Mean and covariance of ``u(x) + OK weights . (z - u(data))`` for an unconditional ``u``.

    Conditioning by kriging (Journel and Huijbregts 1978, Mining Geostatistics, section
    VII; from memory) with ordinary-kriging weights ``W``: the error ``u_g - W' u_d`` has
    covariance ``C_gg - W' C_dg - C_gd W + W' C_dd W``.
    """
    n = data.shape[0]
    k = model_cov(data, data)
    c = model_cov(data, nodes)
    a = np.zeros((n + 1, n + 1))
    a[:n, :n] = k
    a[:n, n] = a[n, :n] = 1.0
    w = np.linalg.solve(a, np.vstack([c, np.ones(c.shape[1])]))[:n]
    return w.T @ scores, model_cov(nodes, nodes) - w.T @ c - c.T @ w + w.T @ k @ w


def grid_pair_correlation(model_cov, shape, cell, power=1):
    """Mean over all ordered node pairs of a 2-D grid of ``rho^power`` (unconditional field).

    Sums over the offsets between nodes, each counted as often as it occurs, so a
    64 x 64 grid costs 127 x 127 covariances rather than 4096^2.
    """
    ny, nx = shape
    di, dj = np.meshgrid(np.arange(1 - ny, ny), np.arange(1 - nx, nx), indexing="ij")
    count = (ny - np.abs(di)) * (nx - np.abs(dj))
    lags = np.column_stack([dj.ravel() * cell[0], -di.ravel() * cell[1]])
    rho = model_cov(lags, np.zeros((1, 2)))[:, 0] / model_cov(np.zeros((1, 2)), np.zeros((1, 2)))[0, 0]
    return float(np.sum(count.ravel() * rho ** power) / (ny * nx) ** 2)
