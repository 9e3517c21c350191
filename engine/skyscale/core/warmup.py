"""Load the compiled kernels into a process before its first real run.

Numba compiles each kernel once per machine (``cache=True`` keeps the machine code on
disk) but loads it into every new process on first call, and the FFT, noise and mask
code import their libraries then too.  A cube worker calls `warm_up` once when it
starts, so that each plane pays only for its own work.
"""

import numpy as np

__all__ = ["warm_up"]


def warm_up(dtype=np.float32):
    """Run a tiny deconvolution that touches every kernel path; return its seconds.

    Parameters
    ----------
    dtype : numpy dtype
        The working precision to load the kernels for (float32 by default).
    """
    import time

    from skyscale.core.driver import deconvolve
    t0 = time.perf_counter()
    n = 48
    y, x = np.mgrid[-n:n, -n:n].astype(np.float64)
    psf = np.exp(-(x ** 2 + y ** 2) / (2 * 1.5 ** 2)) - 0.02 * np.exp(-(x ** 2 + y ** 2) / 800)
    psf /= psf[n, n]
    rng = np.random.default_rng(0)
    sky = np.zeros((n, n))
    sky[20, 22] = 1.0
    sky[26:34, 18:30] = 0.02
    from skyscale.core.fft import convolve_centred
    dirty = convolve_centred(sky, psf) + rng.normal(0, 1e-3, (n, n))
    deconvolve(dirty.astype(dtype), psf.astype(dtype), scales=[0, 3, 6], mask="auto",
               noise_threshold=3.0, restore=True, dtype=dtype, threads=1)
    return time.perf_counter() - t0
