"""The result of a deconvolution run: images, components, history and why it stopped."""

from dataclasses import dataclass, field

import numpy as np

from skyscale.core.stops import STOP_REASONS

__all__ = ["COMPONENT_DTYPE", "STOP_REASONS", "CycleRecord", "DeconvolutionResult",
           "empty_components"]

#: Fields of the component table: pixel position, scale diameter (pixels), integrated flux (Jy).
COMPONENT_DTYPE = np.dtype([("y", np.int32), ("x", np.int32),
                            ("scale", np.float32), ("flux", np.float64)])



def empty_components(n=0):
    """Return a zeroed component table with ``n`` rows."""
    return np.zeros(n, dtype=COMPONENT_DTYPE)


@dataclass
class CycleRecord:
    """State after one major cycle (the exact residual, recomputed)."""

    cycle: int                 #: major-cycle number, 0 = the dirty image before cleaning
    components: int            #: components found so far (cumulative)
    peak: float                #: peak |residual| inside the mask, Jy/beam
    rms: float                 #: rms of the residual inside the mask, Jy/beam
    flux: float                #: total model flux, Jy
    minor_iterations: int = 0  #: components added by this cycle's minor cycle
    minor_stop: str = ""       #: why that minor cycle handed back
    scale_peaks: list = None   #: per-scale peak of the smoothed residual in the mask
    scale_flux: list = None    #: per scale, flux (Jy) of the components found so far

    def as_dict(self):
        return dict(self.__dict__)


@dataclass
class DeconvolutionResult:
    """Everything a deconvolution produced.

    Attributes
    ----------
    model : (ny, nx) ndarray
        The CLEAN model, Jy/pixel.
    residual : (ny, nx) ndarray
        The exact residual after the last major cycle, Jy/beam.
    components : structured ndarray
        One row per component, fields ``y, x, scale, flux`` (see `COMPONENT_DTYPE`).
    stop_reason : str
        A key of `STOP_REASONS`.
    history : list of CycleRecord
        One record per major cycle, the first for the dirty image.
    scales : tuple of float
        Scale diameters in pixels.
    restored : (ny, nx) ndarray or None
        model (*) restoring beam + residual, Jy/beam of the restoring beam.
    beam : Beam or None
        The restoring beam (FWHM major and minor in pixels, position angle in degrees).
    mask : (ny, nx) bool ndarray or None
        The mask in use at the end of the run.
    parameters : dict
        Every parameter of the run, as used.
    timings : dict
        Seconds spent in ``precompute``, ``minor`` and ``major`` cycles.
    warnings : list of str
        Unusual but allowed conditions met during the run.
    rollbacks : int
        Major cycles undone because they raised the peak residual in the mask.
    scale_noise, scale_levels, scale_peaks : list of float
        Per scale: its own noise (Jy/beam, measured where there is no emission), its
        stop level and its peak in the mask at the end.
    active_scales : list of float
        Scales (pixels) still more than 5 % above their stop level when the run stopped.
    noise_region : dict
        Where the noise was measured (``where``, ``pixels_used`` per scale).
    sub_loops, rejected_sub_loops : int
        Single-scale sub-loops run, and those undone because they raised the peak.
    fft_updates, direct_updates : int
        Sub-loops applied by an FFT update of the whole box, and those applied exactly
        to the mask's pixels alone (see `skyscale.Engine.minor_cycle`).
    emission_mask : EmissionMask or None
        The emission mask that followed the residual (its ``sigma`` and its last
        per-scale ``noise``), or None when there was none.
    threads : dict or None
        Threads in effect during the run: ``numba`` (the kernels' count),
        ``fft_backend`` and ``fft_threads``; None when nothing was cleaned.
    stop_detail : str or None
        What happened at an early stop, in a sentence (for 'no_progress' and
        'diverging'); None when `stop_description` says it all.
    """

    model: np.ndarray
    residual: np.ndarray
    components: np.ndarray
    stop_reason: str
    history: list = field(default_factory=list)
    scales: tuple = ()
    restored: np.ndarray = None
    beam: object = None
    mask: np.ndarray = None
    parameters: dict = field(default_factory=dict)
    timings: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    rollbacks: int = 0
    scale_noise: list = None
    scale_levels: list = None
    scale_peaks: list = None
    active_scales: list = None
    noise_region: dict = None
    sub_loops: int = 0
    rejected_sub_loops: int = 0
    fft_updates: int = 0
    direct_updates: int = 0
    emission_mask: object = None
    threads: dict = None
    stop_detail: str = None

    @property
    def stop_description(self):
        """One sentence saying why the run stopped (with what happened, when known)."""
        text = STOP_REASONS.get(self.stop_reason, self.stop_reason)
        if self.mask is None:           # no mask: the residual is measured everywhere
            text = text.replace(" in the mask", "")
        return text if not self.stop_detail else f"{text}: {self.stop_detail}"

    def per_scale(self):
        """Component count and total flux per scale, as a list of dicts."""
        rows = []
        for s in self.scales:
            sel = self.components["scale"] == np.float32(s)
            rows.append({"scale": float(s), "components": int(sel.sum()),
                         "flux": float(self.components["flux"][sel].sum())})
        return rows
