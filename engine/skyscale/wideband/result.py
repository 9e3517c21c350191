"""The result of a wideband (multi-term) deconvolution."""

from dataclasses import dataclass, field

import numpy as np

from skyscale.core.stops import STOP_REASONS

__all__ = ["WidebandResult"]


@dataclass
class WidebandResult:
    """Everything `skyscale.deconvolve_wideband` produced.

    Attributes
    ----------
    terms : (n, ny, nx) ndarray
        Taylor-term models, Jy/pixel: term 0 is the model at the reference frequency,
        term ``t`` the coefficient of ``x^t``, ``x = (nu - nu_0) / nu_0``.
    residuals : (n, ny, nx) ndarray
        Taylor-weighted residual images ``R_t = sum_c w_c x_c^t R_c``, Jy/beam.
    channel_residuals : (nchan, ny, nx) ndarray
        Each channel's exact residual ``dirty_c - PSF_c (*) model_c``, Jy/beam.
    restored : (n, ny, nx) ndarray or None
        Restored Taylor coefficients: ``terms (*) beam`` plus the residuals turned into
        coefficients by the inverse Hessian of the delta scale, Jy/beam.
    spectral_index, spectral_index_error : (ny, nx) ndarray or None
        ``restored[1] / restored[0]`` and its first-order error; NaN where the restored
        term 0 is below ``blank_level``.  None for one term.
    curvature, curvature_error : (ny, nx) ndarray or None
        The spectral curvature and its error (three terms), blanked alike.
    reference_intensity : (ny, nx) ndarray or None
        The intensity at ``nu_0`` (Jy/beam) of the fitted spectrum, blanked alike.
    index_method : str or None
        How the maps were made (`skyscale.wideband.spectral.INDEX_METHODS`).
    blank_level : float or None
        Jy/beam: ``index_snr`` times the term-0 residual noise.
    reference_frequency : float
        ``nu_0``, Hz.
    frequencies, channel_weights : (nchan,) ndarray
        The channels' frequencies (Hz) and normalised weights.
    term_noise : list of float
        Each restored term's residual noise (coefficient units, Jy/beam).
    components : structured ndarray
        `skyscale.wideband.joint_cycle.WIDEBAND_COMPONENT_DTYPE` (one row per
        component, with each term's amplitude).
    hessians : (n_scales, n, n) ndarray
        Each scale's Hessian.
    mask : (ny, nx) bool ndarray or None
        The mask of the last major cycle (the automatic mask as it ended, when used).
    emission_mask : EmissionMask or None
        The automatic mask's state, when ``mask='auto'`` or an `EmissionMask` was given.
    single : DeconvolutionResult or None
        The single-term run, when ``terms=1`` went through `skyscale.deconvolve`.
    """

    terms: np.ndarray
    residuals: np.ndarray
    channel_residuals: np.ndarray
    components: np.ndarray
    stop_reason: str
    reference_frequency: float
    frequencies: np.ndarray
    channel_weights: np.ndarray
    restored: np.ndarray = None
    beam: object = None
    spectral_index: np.ndarray = None
    spectral_index_error: np.ndarray = None
    curvature: np.ndarray = None
    curvature_error: np.ndarray = None
    reference_intensity: np.ndarray = None
    index_method: str = None
    blank_level: float = None
    index_snr: float = None
    term_noise: list = None
    hessians: np.ndarray = None
    scales: tuple = ()
    mask: np.ndarray = None
    emission_mask: object = None
    history: list = field(default_factory=list)
    parameters: dict = field(default_factory=dict)
    timings: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    scale_noise: list = None
    scale_levels: list = None
    scale_peaks: list = None
    sub_loops: int = 0
    rejected_sub_loops: int = 0
    single: object = None

    @property
    def n_terms(self):
        return int(self.terms.shape[0])

    @property
    def model(self):
        """The term-0 model (Jy/pixel at the reference frequency)."""
        return self.terms[0]

    @property
    def stop_description(self):
        text = STOP_REASONS.get(self.stop_reason, self.stop_reason)
        return text if self.mask is not None else text.replace(" in the mask", "")

    def channel_model(self, index):
        """The model of channel ``index``, ``sum_t x^t terms[t]`` (Jy/pixel)."""
        x = (self.frequencies[index] - self.reference_frequency) / self.reference_frequency
        return sum(x ** t * self.terms[t] for t in range(self.n_terms))

    def per_component_spectra(self):
        """Each component's spectral index ``term1 / flux`` (NaN where flux is 0)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.components["flux"] != 0,
                            self.components["term1"] / self.components["flux"], np.nan)
