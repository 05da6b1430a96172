"""Image measures for the imaging problems (`lapbench.problems.imaging`): PSNR of the hole.

PSNR = 10 log10(R^2 / MSE) with R the data range (1 for images in [0, 1]) and MSE the mean
squared difference over the hole's pixels [common practice; the same definition as
skimage.metrics.peak_signal_noise_ratio, which the tests use as the independent reference].
``psnr_reference``: the method's hole pixels against the discrete reference (how well the
method solves the discrete problem); ``psnr_original``: against the photograph's original
pixels (inpainting only: how well the harmonic fill restores the photograph), with
``psnr_reference_vs_original`` the same for the discrete reference itself (the best a
converged pixel-resolution solve can score). Imports nothing of the project.
"""
from __future__ import annotations

import numpy as np

__all__ = ["psnr", "image_measures", "DATA_RANGE"]

DATA_RANGE = 1.0      # images are floats in [0, 1] (lapbench.images.load_image)


def psnr(estimate, truth, data_range: float = DATA_RANGE) -> float:
    """Peak signal-to-noise ratio in dB (inf when the two agree exactly)."""
    e = np.asarray(estimate, dtype=float) - np.asarray(truth, dtype=float)
    mse = float(np.mean(e * e))
    if mse == 0.0:
        return float("inf")
    return float(10.0 * np.log10(data_range ** 2 / mse))


def image_measures(problem, values: np.ndarray) -> dict:
    """PSNRs of the method's values at the hole pixels, and the values themselves for figures.

    ``image``: {"hole_values": [...]} rounded to 10 decimals (the report's reconstructed and
    error images; the rest of the image is the problem's own data).
    """
    ref = np.asarray(problem.reference_values, dtype=float)
    out = {"psnr_reference": psnr(values, ref), "reference": "discrete"}
    if problem.truth is not None:
        out["psnr_original"] = psnr(values, problem.truth)
        out["psnr_reference_vs_original"] = psnr(ref, problem.truth)
    out["image"] = {"hole_values": [round(float(v), 10) for v in values]}
    return out
