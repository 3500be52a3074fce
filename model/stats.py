"""Standard errors of a sampled table: the estimate of each key's probability is a ratio of two
means over the samples, so its error follows from the first and second moments kept per key."""
from __future__ import annotations

import numpy as np


def sample_errors(s1, s2, samples: int, images: int, halting: int):
    """Standard error of each probability estimate p = S1 / (k H) of a sampled table (delta
    method for a ratio of two means over the N samples; Y = k for a halting sample, else 0):
    Var(p) ~ E[(X - p Y)^2] / (N E[Y]^2). Works on scalars and numpy arrays."""
    s1 = np.asarray(s1, dtype=np.float64)
    s2 = np.asarray(s2, dtype=np.float64)
    k, h, n = float(images), float(halting), float(samples)
    p = s1 / (k * h)
    var = (s2 - 2 * p * k * s1 + p * p * k * k * h) / n
    return np.sqrt(np.maximum(var, 0.0) / n) / (k * h / n)


def relative_sample_errors(s1, s2, samples: int, images: int, halting: int):
    """sample_errors divided by the estimates p = S1 / (k H)."""
    s1 = np.asarray(s1, dtype=np.float64)
    return sample_errors(s1, s2, samples, images, halting) / (s1 / (float(images) * halting))

