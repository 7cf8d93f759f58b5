"""Pixel appearance models for the boundary refinement.

The refinement (:mod:`segcut.refine`) ties every band pixel to the terminal by a
log-likelihood ratio (foreground over background). Two models supply it:

- **colour words** (always): the pixel's colour word under the word histograms of
  the two sides of the superpixel mask (:func:`segcut.refine.pixel_log_likelihood`);
- **two Gaussians** (only on *two-cluster images*): a mixture of two Gaussians with
  one shared diagonal covariance, fitted to the pixel features by expectation
  maximisation started from the two sides of the superpixel mask
  (:func:`fit_two_gaussians`). Unlike the word histograms, whose classes
  stay the mask's sides, the mixture re-assigns every pixel to the class that
  explains it, so pixels the superpixels lumped with the wrong side (the dim
  cytoplasm next to a nucleus, a halo around a bright spot) move to the class of
  their own brightness and colour.

A two-cluster image is one whose fitted classes are far apart for their spread:
the Mahalanobis distance between the two class means under the shared covariance
(the *separation*, ``d'``) is at least :data:`TWO_CLUSTER_SEPARATION`. Two
Gaussians a distance ``d'`` apart overlap in a share ``Phi(-d'/2)`` of each class
(common knowledge), about 0.1% at ``d' = 6``; at the threshold, 7, the overlap is
below 0.03%: the image really is two populations of colours, as fluorescence and
most stained microscopy are. Natural photographs, whose sides each hold many
colours, fit two Gaussians poorly and fall below the threshold (measured on the
dev sets, see DEVELOPERS.md), so there the words alone decide as before. On a
two-cluster image the two ratios are added (a product of the two models'
likelihood ratios).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["TWO_CLUSTER_SEPARATION", "TwoGaussianFit", "fit_two_gaussians"]

#: Separation (Mahalanobis distance between the two class means) from which an
#: image counts as two-cluster and the two-Gaussian model joins the colour words.
TWO_CLUSTER_SEPARATION = 7.0
#: Expectation-maximisation rounds of the two-Gaussian fit.
_ITERATIONS = 10
#: At most about this many pixels (an even stride over the image) enter the fit.
_SAMPLE = 60000
#: Added to every variance (feature units squared; CIELAB lightness runs 0-100).
_VARIANCE_FLOOR = 1.0
#: Bound on the magnitude of one pixel's log-likelihood ratio.
_LLR_LIMIT = 20.0


@dataclass(frozen=True, eq=False)
class TwoGaussianFit:
    """Two Gaussian classes with one shared diagonal covariance (:func:`fit_two_gaussians`).

    Attributes
    ----------
    weights : (2,) float ndarray
        Mixture weights of the foreground (0) and background (1) classes.
    means : (2, C) float ndarray
    variance : (C,) float ndarray
        The shared diagonal covariance.
    separation : float
        Mahalanobis distance between the two class means under that covariance.
    """

    weights: np.ndarray
    means: np.ndarray
    variance: np.ndarray
    separation: float

    @property
    def two_cluster(self) -> bool:
        """True when the classes are at least :data:`TWO_CLUSTER_SEPARATION` apart."""
        return self.separation >= TWO_CLUSTER_SEPARATION

    def refine_entry(self) -> dict:
        """The ``pixel_model`` and ``separation`` a refinement record names for this fit."""
        return {"pixel_model": "colour_words+two_gaussians" if self.two_cluster
                else "colour_words", "separation": round(self.separation, 6)}

    def log_likelihood_ratio(self, features) -> np.ndarray:
        """Per pixel, log of (weight x density) of the foreground class over the background's.

        With one shared covariance it is linear in the features; clipped to +-20.
        Returns the spatial shape of ``features`` (all axes but the last).
        """
        features = np.asarray(features, dtype=np.float64)
        a, b = _linear_ratio(self.weights, self.means, self.variance)
        flat = features.reshape(-1, features.shape[-1])
        return np.clip(flat @ a + b, -_LLR_LIMIT, _LLR_LIMIT).reshape(features.shape[:-1])


def _linear_ratio(weights, means, variance):
    """(a, b) with log(w0 N(x; m0, V) / (w1 N(x; m1, V))) = x @ a + b (shared diagonal V)."""
    a = (means[0] - means[1]) / variance
    b = float(np.log(weights[0] / weights[1])
              - 0.5 * ((means[0] ** 2 - means[1] ** 2) / variance).sum())
    return a, b


def fit_two_gaussians(features, mask) -> TwoGaussianFit:
    """Fit two Gaussians (shared diagonal covariance) to pixel features, started from ``mask``.

    Expectation maximisation on an even sample of the pixels; class 0 starts as
    the pixels inside ``mask`` (foreground), class 1 as the rest, and every pixel's
    membership is re-estimated each round from the two densities alone.

    Parameters
    ----------
    features : (..., C) float ndarray
        Pixel features (CIELAB or 100 x gray), spatial shape of ``mask``.
    mask : bool ndarray
        Start split; both sides should be non-empty.

    Returns
    -------
    TwoGaussianFit

    Examples
    --------
    A dark field with a bright square whose start mask is one pixel too small:
    the fit finds the two brightness levels, and the ring pixels, outside the
    start mask, are still called foreground.

    >>> image = np.full((20, 20), 10.0); image[5:15, 5:15] = 60.0
    >>> start = np.zeros((20, 20), bool); start[6:14, 6:14] = True
    >>> fit = fit_two_gaussians(image[..., None], start)
    >>> llr = fit.log_likelihood_ratio(image[..., None])
    >>> bool(((llr > 0) == (image > 30)).all()), round(fit.separation)
    (True, 50)
    """
    mask = np.asarray(mask, dtype=bool)
    flat = np.asarray(features, dtype=np.float64).reshape(mask.size, -1)
    stride = max(1, mask.size // _SAMPLE)
    sample = flat[::stride]
    squares = sample ** 2
    totals = (float(len(sample)), sample.sum(axis=0), squares.sum(axis=0))
    foreground = mask.ravel()[::stride].astype(np.float64)
    for _ in range(_ITERATIONS):
        a, b = _linear_ratio(*_m_step(sample, squares, foreground, totals))
        # with one shared variance the class log-odds are linear in the features
        foreground = 1.0 / (1.0 + np.exp(-np.clip(sample @ a + b, -50.0, 50.0)))
    weights, means, variance = _m_step(sample, squares, foreground, totals)
    separation = float(np.sqrt((((means[0] - means[1]) ** 2) / variance).sum()))
    return TwoGaussianFit(weights=weights, means=means, variance=variance,
                          separation=separation)


def _m_step(sample, squares, foreground, totals):
    """Weights, means and the shared (weight-averaged) diagonal variance.

    ``squares`` is ``sample ** 2``; ``totals`` are the count, sum and sum of squares
    of the whole sample; the background's moments are the totals minus the
    foreground's.
    """
    n, total_sum, total_squares = totals
    fg = (float(foreground.sum()), foreground @ sample, foreground @ squares)
    counts = np.array([fg[0], n - fg[0]]) + 1e-9
    firsts = np.stack([fg[1], total_sum - fg[1]])
    seconds = np.stack([fg[2], total_squares - fg[2]])
    weights = counts / counts.sum()
    means = firsts / counts[:, None]
    own = np.maximum(seconds / counts[:, None] - means ** 2, 0.0)
    variance = (weights[:, None] * (own + _VARIANCE_FLOOR)).sum(axis=0)
    return weights, means, variance
