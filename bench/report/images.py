"""Report figures of the imaging problems: reconstructed images and error images.

For one imaging problem (records whose metrics hold ``image.hole_values``, written by
`lapbench.image_metrics`), the first row shows the input (the photograph with the hole blanked;
for cloning the target), the discrete reference (the 5-point solution at pixel resolution by a
direct solve, what every error of these records is measured against) and each chosen method's
reconstruction; the second row the original photograph (inpainting) or the guidance source
(cloning) and each method's error image (method minus discrete reference on the hole's pixels,
diverging map centred at zero, one scale per panel); for the red channel of a colour
photograph whose green and blue runs are recorded too, a third row with the colour composites.
Chosen methods: per solver the most
accurate run by the report's metric, at most `MAX_METHODS`, most accurate first. The problem is
rebuilt from the record's problem config (the photographs are package data; the reference is
recomputed, a direct solve of the hole's pixels) so that records store only the hole's values.

The figure builder takes the report's `Figure` type and save function as arguments, so that
this module does not import `lapbench.report.figures` (which calls it).
"""
from __future__ import annotations

import numpy as np

__all__ = ["fig_images", "MAX_METHODS", "is_image_record"]

MAX_METHODS = 3
ERROR_CMAP = "RdBu_r"
TITLE_SIZE = 7


def is_image_record(rec) -> bool:
    m = rec.get("metrics") or {}
    return rec.get("status") == "ok" and isinstance(m.get("image"), dict) and "hole_values" in m["image"]


def _picture(prob, values=None) -> np.ndarray:
    """The problem's photograph in image layout, with the hole set to `values` (NaN: blank)."""
    from lapbench.images import lattice_to_image

    V = np.array(prob.image, dtype=float)
    I, J = prob.hole
    V[I, J] = np.nan if values is None else values
    return lattice_to_image(V)


def _error_picture(prob, values) -> np.ndarray:
    from lapbench.images import lattice_to_image

    E = np.full(prob.image.shape, np.nan)
    I, J = prob.hole
    E[I, J] = np.asarray(values, float) - prob.reference_values
    return lattice_to_image(E)


def _channel_siblings(recs, i) -> dict | None:
    """For a red-channel record: the green and blue records of the same problem config, solver
    and resolution ({channel: record index}), or None when either is missing."""
    import json

    def key(r):
        c = {k: v for k, v in (r["problem"].get("config") or {}).items() if k != "channel"}
        return (json.dumps(c, sort_keys=True, default=str), r["solver"]["name"],
                r["solver"].get("resolution_label"), json.dumps(r["solver"].get("config"), sort_keys=True, default=str))

    r0 = recs[i]
    if (r0["problem"].get("config") or {}).get("channel") != "red":
        return None
    k0, out = key(r0), {"red": i}
    for j, r in enumerate(recs):
        ch = (r["problem"].get("config") or {}).get("channel")
        if ch in ("green", "blue") and ch not in out and is_image_record(r) and key(r) == k0:
            out[ch] = j
    return out if len(out) == 3 else None


def _composite(pictures) -> np.ndarray:
    """RGB image from three channel pictures; blank (NaN) pixels in magenta."""
    rgb = np.stack(pictures, axis=-1)
    blank = np.isnan(rgb).any(axis=-1)
    rgb = np.nan_to_num(rgb)
    rgb[blank] = (1.0, 0.0, 1.0)
    return np.clip(rgb, 0.0, 1.0)


def fig_images(pid, recs, frame, cfg, folder, figure_type, save):
    """The reconstructed-image and error-image figure of problem id `pid`, or None."""
    import matplotlib.pyplot as plt
    from matplotlib.colors import TwoSlopeNorm

    from lapbench.problems import make_problem

    rows = [i for i in frame.index[frame["problem_id"] == pid] if is_image_record(recs[i])]
    if not rows:
        return None
    best = {}
    for i in rows:
        err = frame.at[i, "error"]
        s = recs[i]["solver"]["name"]
        if np.isfinite(err) and (s not in best or err < frame.at[best[s], "error"]):
            best[s] = i
    chosen = sorted(best.values(), key=lambda i: frame.at[i, "error"])[:MAX_METHODS]
    if not chosen:
        return None
    prob = make_problem(recs[chosen[0]]["problem"]["config"])
    is_clone = prob.truth is None
    ncols = 2 + len(chosen)
    siblings = {i: _channel_siblings(recs, i) for i in chosen}
    colour = {i: sib for i, sib in siblings.items() if sib is not None}
    nrows = 3 if colour else 2
    w = cfg.figures.width
    fig, axes = plt.subplots(nrows, ncols, figsize=(1.5 * w, 1.5 * w / ncols * 1.3 * nrows),
                             layout="constrained", squeeze=False)
    grey = plt.get_cmap("gray").with_extremes(bad="#d62728")      # the blank hole in red
    show = dict(cmap=grey, vmin=0.0, vmax=1.0, interpolation="nearest")
    axes[0, 0].imshow(_picture(prob), **show)
    axes[0, 0].set_title("target, hole in red" if is_clone else "input, hole in red", fontsize=TITLE_SIZE)
    axes[0, 1].imshow(_picture(prob, prob.reference_values), **show)
    ref_psnr = recs[chosen[0]]["metrics"].get("psnr_reference_vs_original")
    axes[0, 1].set_title("discrete reference\n(5-point, direct)"
                         + (f"\nPSNR {ref_psnr:.1f} dB" if ref_psnr is not None else ""), fontsize=TITLE_SIZE)
    if is_clone:
        from lapbench.images import load_image

        p = recs[chosen[0]]["problem"]["config"]
        src = load_image(p.get("source", "astronaut"), p.get("channel", "grey"), _picture(prob).shape)
        axes[1, 0].imshow(src, **show)
        axes[1, 0].set_title("guidance source", fontsize=TITLE_SIZE)
    else:
        axes[1, 0].imshow(_picture(prob, prob.truth), **show)
        axes[1, 0].set_title("original", fontsize=TITLE_SIZE)
    axes[1, 1].set_visible(False)
    for k, i in enumerate(chosen):
        r = recs[i]
        vals = np.asarray(r["metrics"]["image"]["hole_values"], float)
        res = str(r["solver"].get("resolution_label") or "")
        label = r["solver"]["name"] + (f"\n{res[:24]}" if res else "")
        ax = axes[0, 2 + k]
        ax.imshow(_picture(prob, vals), **show)
        psnr = r["metrics"].get("psnr_original")
        ax.set_title(label + (f"\nPSNR {psnr:.1f} dB" if psnr is not None else ""), fontsize=TITLE_SIZE)
        E = _error_picture(prob, vals)
        lim = float(np.nanmax(np.abs(E))) if np.isfinite(E).any() else 1.0
        lim = lim if lim > 0 else 1e-16
        ax = axes[1, 2 + k]
        im = ax.imshow(np.ma.masked_invalid(E), cmap=ERROR_CMAP, norm=TwoSlopeNorm(0.0, -lim, lim),
                       interpolation="nearest")
        err = frame.at[i, "error"]
        ax.set_title(f"error vs reference\n{cfg.metric} {err:.1e}", fontsize=TITLE_SIZE)
        cb = fig.colorbar(im, ax=ax, shrink=0.9, orientation="horizontal", location="bottom")
        cb.ax.tick_params(labelsize=TITLE_SIZE - 1)
        cb.formatter.set_powerlimits((-2, 3))
    if colour:   # per-channel records of a colour photograph: the composite of the three channels
        first = next(iter(colour.values()))
        probs = {ch: make_problem(recs[first[ch]]["problem"]["config"]) for ch in ("red", "green", "blue")}
        axes[2, 0].imshow(_composite([_picture(probs[ch]) for ch in probs]), interpolation="nearest")
        axes[2, 0].set_title("colour input, hole in magenta", fontsize=TITLE_SIZE)
        axes[2, 1].imshow(_composite([_picture(probs[ch], probs[ch].reference_values) for ch in probs]),
                          interpolation="nearest")
        axes[2, 1].set_title("colour reference", fontsize=TITLE_SIZE)
        for k, i in enumerate(chosen):
            ax = axes[2, 2 + k]
            if i not in colour:
                ax.set_visible(False)
                continue
            vals = {ch: np.asarray(recs[colour[i][ch]]["metrics"]["image"]["hole_values"], float) for ch in probs}
            ax.imshow(_composite([_picture(probs[ch], vals[ch]) for ch in probs]), interpolation="nearest")
            ax.set_title(f"{recs[i]['solver']['name']}, colour\n(three channel runs)", fontsize=TITLE_SIZE)
    for ax in axes.ravel():
        ax.set_xticks([])
        ax.set_yticks([])
        ax.grid(False)
    from lapbench.report.frame import _slug

    import hashlib

    # problem ids of imaging problems differ late (the mask's shape): the slug alone would collide
    key = f"images__{_slug(pid)[:40]}-{hashlib.sha1(str(pid).encode()).hexdigest()[:8]}"
    caption = ("Reconstructed images (top) and error images (bottom) of the most accurate runs per method "
               "(at most three). Errors are against the discrete reference: the 5-point solution at pixel "
               "resolution by a direct solve (white: pixels outside the hole; one colour scale per panel). "
               + ("The second row's first panel is the guidance source of the cloning."
                  if is_clone else "PSNR is against the photograph's original pixels in the hole.")
               + (" Third row: the colour composite of the red, green and blue runs of the same "
                  "configuration (colour images are solved per channel)." if colour else ""))
    return figure_type(key, f"Reconstructed and error images: {pid}", caption, save(fig, folder, key, cfg), pid)
