"""Robust noise estimates for stop rules and masks.

The one home of noise estimates.  `robust_noise` (1.4826 MAD) is the one estimator,
used in two ways that differ in how they leave emission out:

- `emission_free_noise`, the engine's (stop levels; `scale_noise` applies it per
  scale): pixels known to hold emission are excluded and the rest clipped around the
  median at `CLIP_SIGMA`;
- `detection_noise`, the emission mask's and the advisor's: pixels beyond the
  detection level are excluded with a margin around them, which also drops the blurred
  wings of bright compact sources.  With the engine's rule instead, twelve points at
  3000 sigma read as extended structures of 21 and 114 px in the advisor's tests, and
  on the demo the mask changes by about 1 % of its pixels
  (``benchmarks/noise_estimators.py``).

References
----------
.. [1] Rousseeuw, P. J. & Croux, C. 1993, "Alternatives to the median absolute
   deviation", JASA 88, 1273.
"""

import math
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import scipy.fft as sfft
from scipy import ndimage

__all__ = ["MAD_TO_SIGMA", "CLIP_SIGMA", "DETECTION_SAMPLES", "DETECTION_ROUNDS",
           "MIN_OUTSIDE_PIXELS",
           "robust_noise", "emission_free_noise", "detection_noise", "scale_noise", "grow_mask",
           "sample_step", "SampledDilations",
           "keep_outside_noise"]

#: Factor turning the median absolute deviation into a Gaussian sigma [1]_.
MAD_TO_SIGMA = 1.4826

#: `detection_noise` estimates from an even subsample of at most this many pixels.
DETECTION_SAMPLES = 1 << 16

#: Rounds of `detection_noise` (it settles in two or three).
DETECTION_ROUNDS = 4


def robust_noise(image, mask=None):
    """Gaussian-equivalent noise of ``image`` from the median absolute deviation.

    Parameters
    ----------
    image : (ny, nx) ndarray
        Residual or dirty image (Jy/beam).
    mask : (ny, nx) ndarray of bool, optional
        Pixels that hold emission; they are left out of the estimate.  When the mask
        covers every pixel the whole image is used.

    Returns
    -------
    sigma : float
        ``1.4826 * median(|x - median(x)|)`` over the finite pixels outside the mask.

    References
    ----------
    .. [1] Rousseeuw & Croux 1993, JASA 88, 1273.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> round(robust_noise(rng.normal(0, 2.0, (256, 256))), 1)
    2.0
    """
    data = np.asarray(image, dtype=np.float64)
    if mask is not None:
        outside = ~np.asarray(mask, dtype=bool)
        if outside.any():
            data = data[outside]
    data = data[np.isfinite(data)]
    if data.size == 0:
        return 0.0
    return _mad_sigma(data)[0]


def _mad_sigma(data):
    """``(1.4826 MAD, median)`` of a non-empty 1-D float array (medians select values,
    so float32 data need no widening)."""
    med = np.median(data)
    return float(MAD_TO_SIGMA * np.median(np.abs(data - med))), med


#: Pixels farther than this many robust sigmas from the median are emission, not noise,
#: and are left out of the next pass of `emission_free_noise` (common practice).
CLIP_SIGMA = 4.0

#: `emission_free_noise` reads at most about this many pixels (a regular subsample).
#: 1.4826 MAD of N independent Gaussian samples scatters by about 1.17 / sqrt(N)
#: (Rousseeuw & Croux 1993): 2^15 samples give 0.65 %.  Neighbouring pixels of a
#: residual are correlated over the beam, so an image holds about one independent sample
#: per beam area (some 2,300 at 256^2 and 37,000 at 1024^2 for a 5-pixel beam): a
#: subsample this size loses next to nothing at 256^2 and under a fifth of the
#: precision at 1024^2, and its medians cost a quarter of those of 2^17.
MAX_SAMPLES = 1 << 15

#: Fewest pixels a noise estimate may rest on before `scale_noise` excludes less.
MIN_NOISE_PIXELS = 400


def grow_mask(mask, radius):
    """Square dilation of ``mask`` by ``radius`` pixels (separable running maximum).

    Only the mask's bounding box grown by the radius is filtered, so a compact mask in
    a large image costs what its box costs.  The same as
    ``scipy.ndimage.binary_dilation`` with a ``(2 r + 1)`` square and the outside empty.
    """
    mask = np.asarray(mask, dtype=bool)
    radius = int(radius)
    if radius <= 0:
        return mask
    rows = np.flatnonzero(mask.any(axis=1))
    if rows.size == 0:
        return np.zeros_like(mask)
    cols = np.flatnonzero(mask.any(axis=0))
    ny, nx = mask.shape
    y0, y1 = max(rows[0] - radius, 0), min(rows[-1] + radius + 1, ny)
    x0, x1 = max(cols[0] - radius, 0), min(cols[-1] + radius + 1, nx)
    size = 2 * radius + 1
    box = np.ascontiguousarray(mask[y0:y1, x0:x1]).view(np.uint8)
    grown = ndimage.maximum_filter1d(box, size, axis=0, mode="constant")
    grown = ndimage.maximum_filter1d(grown, size, axis=1, mode="constant")
    out = np.zeros_like(mask)
    out[y0:y1, x0:x1] = grown.astype(bool)
    return out



def sample_step(shape):
    """The stride of the regular subsample the noise reads (at most `MAX_SAMPLES`)."""
    return max(int(np.ceil(np.sqrt(shape[0] * shape[1] / MAX_SAMPLES))), 1)


class SampledDilations:
    """Square dilations of one mask by several radii, read at the noise's subsample.

    ``at(r)`` equals ``grow_mask(mask, r)[::step, ::step]``, from one summed-area
    table of the mask (Crow 1984) rather than a running maximum over the whole image
    for every radius.

    References
    ----------
    .. [1] Crow, F. C. 1984, Computer Graphics 18(3), 207 (summed-area tables).
    """

    def __init__(self, mask, step):
        mask = np.asarray(mask, dtype=bool)
        self.shape = mask.shape
        self.step = int(step)
        self.table = np.zeros((mask.shape[0] + 1, mask.shape[1] + 1), dtype=np.int32)
        np.cumsum(mask, axis=0, dtype=np.int32, out=self.table[1:, 1:])
        np.cumsum(self.table[1:, 1:], axis=1, out=self.table[1:, 1:])

    def at(self, radius):
        """Pixels of the subsample within ``radius`` (a square) of the mask."""
        r = max(int(radius), 0)
        (ny, nx), t = self.shape, self.table
        ys = np.arange(0, ny, self.step)
        xs = np.arange(0, nx, self.step)
        y0, y1 = np.clip(ys - r, 0, ny), np.clip(ys + r + 1, 0, ny)
        x0, x1 = np.clip(xs - r, 0, nx), np.clip(xs + r + 1, 0, nx)
        count = (t[np.ix_(y1, x1)] - t[np.ix_(y0, x1)] - t[np.ix_(y1, x0)]
                 + t[np.ix_(y0, x0)])
        return count > 0


def emission_free_noise(image, *, exclude=None, region=None, border=0, passes=3,
                        exclude_sampled=None):
    """Noise of an image measured where it holds no emission, and where that was.

    Parameters
    ----------
    image : (ny, nx) ndarray
        A residual, or a residual smoothed by one scale (Jy/beam).
    exclude : (ny, nx) bool ndarray, optional
        Pixels known to hold emission (a mask grown by the scale's radius): left out.
    region : (ny, nx) bool ndarray, optional
        Where the image is trustworthy (for example where the residual is exact);
        default everywhere.
    border : int
        Pixels this close to the image edge are left out (edge effects of smoothing).
    passes : int
        Passes of the clipping: after each, pixels beyond ``CLIP_SIGMA`` robust sigmas
        from the median are left out, so unmasked emission cannot inflate the estimate.
    exclude_sampled : bool ndarray, optional
        ``exclude`` already read at the subsample ``[::step, ::step]`` this function
        takes (`sample_step`); given instead of ``exclude``.

    Returns
    -------
    sigma : float
        1.4826 MAD of the pixels kept ([1]_); 0 when none are left.
    used : int
        How many (subsampled) pixels the last pass used.

    References
    ----------
    .. [1] Rousseeuw & Croux 1993, JASA 88, 1273.
    """
    img = np.asarray(image)
    ny, nx = img.shape
    step = sample_step((ny, nx))
    sub = img[::step, ::step]                # the subsample first: masks at its size
    keep = np.ones(sub.shape, dtype=bool) if region is None else \
        np.array(np.asarray(region, dtype=bool)[::step, ::step])
    if exclude is not None:
        keep &= ~np.asarray(exclude, dtype=bool)[::step, ::step]
    if exclude_sampled is not None:
        keep &= ~exclude_sampled
    if border > 0:
        b = min(int(border), (ny - 1) // 2, (nx - 1) // 2)
        lo = -(-b // step)                   # first kept row (column): index * step >= b
        keep[:lo] = False
        keep[-(-(ny - b) // step):] = False  # index * step >= n - b
        keep[:, :lo] = False
        keep[:, -(-(nx - b) // step):] = False
    data = sub[keep]
    data = data.astype(np.float32 if data.dtype == np.float32 else np.float64, copy=False)
    data = data[np.isfinite(data)]
    sigma = 0.0
    for _ in range(max(int(passes), 1)):
        if data.size == 0:
            return 0.0, 0
        sigma, med = _mad_sigma(data)
        if sigma == 0.0:
            break
        inside = np.abs(data - med) <= CLIP_SIGMA * sigma
        if inside.all():
            break
        data = data[inside]
    return sigma, int(data.size)


#: A broad scale's measured noise above this multiple of the smallest scale's noise
#: times ``sqrt(B_kk(0) / B_00(0))`` holds emission the mask missed (smoothing keeps
#: emission and lowers noise); the scaled value is used instead.
CONTAMINATED = 2.0

#: A scale's noise is measured only where its emission-free area holds at least this
#: many kernel areas (independent samples of its smoothed noise); otherwise it comes
#: from the smallest scale's noise and the PSF (`scale_noise`).
MIN_INDEPENDENT = 50


#: Fewest pixels (at full resolution) outside the grown mask for the smallest scale's
#: noise to be measured there; with fewer, it is measured over the whole trustworthy
#: image with clipping and high-passing instead (`scale_noise`).  About 80 beams of
#: 25 pixels: the estimate's own scatter is then near 10 % (1.4826 MAD of N independent
#: Gaussian samples scatters by about 1.17 / sqrt(N), Rousseeuw & Croux 1993).
MIN_OUTSIDE_PIXELS = 2000


def _trusted(region, shape, radius):
    """``region`` (default everywhere) less every pixel within ``radius`` of a pixel
    outside it: a smoothing of that width mixes untrusted (blank, inexact) pixels in."""
    if region is None:
        return None
    region = np.asarray(region, dtype=bool)
    if radius <= 0 or region.all():
        return region
    return region & ~grow_mask(~region, radius)


def _high_passed(planes, ratios, cross, radii, exclude_sampled, region):
    """The smallest scale's noise from the residual minus its largest-scale smoothing.

    For noise correlated like the PSF its deviation is
    ``sigma sqrt(1 - 2 B_0K(0) + B_KK(0))``; broad emission (and broad cleaning) hardly
    reaches it.  Returns ``(sigma, used)``, ``(0, 0)`` when it cannot be made.
    """
    n = planes.shape[0]
    if cross is None or ratios is None or n < 2 or radii[-1] <= 0:
        return 0.0, 0
    big = n - 1
    factor = 1.0 - 2.0 * float(cross[big]) + float(ratios[big]) ** 2
    if factor <= 0.05:
        return 0.0, 0
    r = int(radii[big])
    hp, used = emission_free_noise(planes[0] - planes[big], exclude_sampled=exclude_sampled,
                                   region=_trusted(region, planes.shape[1:], r), border=r)
    return hp / np.sqrt(factor), used


def scale_noise(planes, radii, *, mask=None, region=None, ratios=None, previous=None,
                cross=None):
    """Noise of each scale's smoothed residual, measured where there is no emission.

    Parameters
    ----------
    planes : (n_scales, ny, nx) ndarray
        The residual smoothed by each scale, smallest scale first.
    radii : sequence of int
        Each scale kernel's support half-width: the mask is grown by it and the image
        border of that width is left out.
    mask : (ny, nx) bool ndarray, optional
        Where the emission is (the clean mask); left out.
    region : (ny, nx) bool ndarray, optional
        Where the residual can be trusted (exact, and not blank); default everywhere.
        Each scale also leaves out the pixels within its radius of the region's edge.
    ratios : (n_scales,) array_like, optional
        Expected noise of each scale relative to the others, ``sqrt(B_kk(0))`` (see
        Notes).  Used for a scale whose emission-free area is too small to measure it.
    previous : float, optional
        Not used: every cycle measures its own noise (an estimate carried from an
        earlier cycle, made while the emission's sidelobes were still in the residual,
        could be many times too high).
    cross : (n_scales,) array_like, optional
        ``B_0k(0)``, the PSF smoothed once by each scale at its centre.  With ``ratios``
        it gives a second estimate of the smallest scale's noise from the residual
        minus its smoothing by the largest scale, which broad emission cannot inflate:
        for noise correlated like the PSF its deviation is
        ``sigma sqrt(1 - 2 B_0K(0) + B_KK(0))``.  It replaces the first when that is
        more than `CONTAMINATED` times higher (emission the mask missed), and is the
        estimate used when the mask leaves too little outside it.

    Returns
    -------
    sigma : (n_scales,) float64 ndarray
    used : (n_scales,) int64 ndarray
        Pixels (subsampled) each measurement used; 0 where the noise was scaled.
    how : list of str
        How each scale's noise was found, in words: measured outside the mask, measured
        over the whole image (clipped, or high-passed), or scaled from the smallest
        scale.

    Notes
    -----
    For white noise of deviation ``sigma`` a unit-sum kernel ``s`` leaves
    ``sigma * sqrt(sum s^2)``.  Interferometric noise is correlated like the PSF
    (natural weighting makes the PSF its covariance), so smoothing by ``s_k`` leaves
    ``sigma * sqrt(B_kk(0))`` with ``B_kk = PSF (*) s_k (*) s_k``, which falls much less.
    Each scale's noise is measured where it can be (other weightings change the
    ratio); where the image holds too few independent samples of a broad scale's noise
    outside the emission, the smallest scale's measured noise is scaled by
    ``sqrt(B_kk(0) / B_00(0))``.

    The smallest scale's noise is measured outside the mask when at least
    `MIN_OUTSIDE_PIXELS` trustworthy pixels lie there.  Otherwise (a mask over most of
    the image, or one that only leaves out blank pixels) it is measured over the whole
    trustworthy image, with emission clipped at `CLIP_SIGMA` and, when the scales allow
    it, high-passed (residual minus its largest-scale smoothing) so that broad emission
    inside the mask cannot raise it.

    References
    ----------
    .. [1] Rousseeuw & Croux 1993, JASA 88, 1273.
    """
    n = planes.shape[0]
    ny, nx = planes.shape[1:]
    sigma = np.zeros(n)
    used = np.zeros(n, dtype=np.int64)
    how = ["measured outside the mask"] * n
    region = None if region is None else np.asarray(region, dtype=bool)
    mask = None if mask is None else np.asarray(mask, dtype=bool)
    if mask is not None:
        free = ~mask if region is None else (region & ~mask)
        if not free.any():
            mask = None           # the mask leaves nothing trustworthy out: no emission known
    step = sample_step((ny, nx))
    dilations = None if mask is None else SampledDilations(mask, step)

    def measure(k):               # each scale on its own: the scales share out the threads
        r = int(radii[k])
        trusted = _trusted(region, (ny, nx), r)
        grown = None if mask is None else dilations.at(r)
        return emission_free_noise(planes[k], exclude_sampled=grown, region=trusted,
                                   border=r), trusted

    workers = min(int(sfft.get_workers()), n)    # the run's threads (`thread_limit`)
    if workers > 1:
        with ThreadPoolExecutor(workers) as pool:
            measured = list(pool.map(measure, range(n)))
    else:
        measured = [measure(k) for k in range(n)]
    for k in range(n):
        r = int(radii[k])
        (sigma[k], used[k]), trusted = measured[k]
        if k > 0:
            independent = used[k] * step * step / max(np.pi * r * r, 1.0)
            expected = 0.0 if ratios is None else sigma[0] * float(ratios[k]) / float(ratios[0])
            if ratios is not None and sigma[0] > 0 and (
                    independent < MIN_INDEPENDENT or sigma[k] <= 0 or
                    sigma[k] > CONTAMINATED * expected):
                sigma[k], used[k], how[k] = expected, 0, "scaled from the smallest scale"
            elif mask is None:
                how[k] = "measured over the whole image, emission clipped"
            continue
        whole = mask is None or used[0] * step * step < MIN_OUTSIDE_PIXELS or sigma[0] <= 0
        if whole:
            if mask is not None:
                left = _outside(mask, trusted)
            sigma[0], used[0] = emission_free_noise(planes[0], region=trusted)
            how[0] = "measured over the whole image, emission clipped"
            if mask is not None:
                how[0] += f" (the mask leaves only {left} pixels outside it)"
        hp, hp_used = _high_passed(planes, ratios, cross, radii,
                                   None if whole else dilations.at(int(radii[-1])), region)
        if hp_used >= MIN_NOISE_PIXELS and 0 < hp and hp * CONTAMINATED < sigma[0]:
            sigma[0], used[0] = hp, hp_used
            how[0] = ("high-passed (residual minus its largest-scale smoothing) over the "
                      "whole image" if whole else
                      "high-passed (residual minus its largest-scale smoothing) outside "
                      "the mask")
    return sigma, used, how


def _outside(mask, region):
    """Trustworthy pixels outside ``mask``."""
    free = ~mask if region is None else (region & ~mask)
    return int(free.sum())


def detection_noise(smoothed, sigma, *, exclude=None, margin_px=0.0):
    """Robust noise of a smoothed image for detecting emission (the emission mask's rule).

    Pixels beyond ``sigma`` times the current estimate, measured from zero, are left
    out with a margin around them and the estimate is made again from all the rest,
    until it settles.  Unlike `emission_free_noise` (a clip around the median that
    drops only the outliers themselves), it also drops the wings of what it finds: at
    wide smoothings the blurred wings of bright compact sources are below any clip
    level but would lower the noise and make their blur look like extended emission.

    Parameters
    ----------
    smoothed : (ny, nx) ndarray
    sigma : float
        Pixels beyond ``sigma`` times the current estimate (either sign) count as
        emission and are left out, with a margin, before the next estimate.
    exclude : (ny, nx) ndarray of bool, optional
        Pixels always left out (for example those holding model flux).
    margin_px : float
        Radius in pixels of the margin around excluded pixels.

    Returns
    -------
    noise : float
        ``robust_noise`` (1.4826 MAD, [1]_) of the pixels left, from an even subsample
        of at most `DETECTION_SAMPLES` pixels.  When emission would leave fewer than a
        tenth of the pixels, the last estimate that left more is kept.
    """
    step = max(1, int(math.sqrt(smoothed.size / DETECTION_SAMPLES)))
    data = smoothed[::step, ::step]
    fixed = None if exclude is None else np.asarray(exclude, dtype=bool)[::step, ::step]
    if fixed is not None and fixed.mean() > 0.9:
        fixed = None
    noise = robust_noise(data, mask=fixed)
    radius = margin_px / step
    for _ in range(DETECTION_ROUNDS):
        if noise <= 0:
            break
        out = np.abs(data) > sigma * noise
        if radius >= 1 and out.any():
            out = ndimage.distance_transform_edt(~out) <= radius
        if fixed is not None:
            out |= fixed
        if out.mean() > 0.9:
            break
        new = robust_noise(data, mask=out)
        if abs(new - noise) <= 1e-3 * noise:
            noise = new
            break
        noise = new
    return float(noise)
def keep_outside_noise(sigma, how, kept, ratios):
    """Hold on to the last noise measured outside the mask when it can no longer be.

    When the mask leaves too few trustworthy pixels outside it (`scale_noise` then
    measures over the whole image, inside the mask, where cleaning may lower the
    residual), the lowest of the smallest scale's noises measured outside the mask in
    earlier cycles is used instead (cleaning removes sidelobes there but never cleans
    there, so the lowest is the least contaminated), and the scales scaled from it
    follow.  An estimate made over the whole image is never carried: on a dirty image
    it holds the emission's sidelobes.

    Parameters
    ----------
    sigma : (n_scales,) ndarray
        This cycle's noise per scale (`scale_noise`); changed in place.
    how : list of str
        How each was found (`scale_noise`); changed in place.
    kept : float or None
        The lowest smallest-scale noise measured outside the mask so far, or None.
    ratios : (n_scales,) array_like
        ``sqrt(B_kk(0))`` per scale.

    Returns
    -------
    kept : float or None
        What to pass as ``kept`` next time.
    """
    if how[0].startswith("measured outside") or how[0].endswith("outside the mask"):
        return float(sigma[0]) if kept is None or not 0 < kept < sigma[0] else kept
    if kept is None or "mask leaves only" not in how[0] or not kept > 0:
        return kept
    sigma[0] = float(kept)
    how[0] = ("kept: the lowest measured outside the mask in an earlier cycle (the mask "
              "now leaves too few pixels outside it)")
    for k in range(1, len(sigma)):
        if how[k].startswith("scaled"):
            sigma[k] = sigma[0] * float(ratios[k]) / float(ratios[0])
    return kept
