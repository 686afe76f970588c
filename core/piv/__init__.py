"""Correlation engine: multi-pass FFT cross-correlation with symmetric window deformation.

Method (each step a published one, named where it is used):

1. The first pass correlates straight windows of the two frames. The windows of a pass go
   through batched real FFTs (``scipy.fft.rfft2``/``irfft2``) read straight from strided views
   of the frames, one batch per band of grid rows (up to ``BAND_WINDOWS`` windows), the bands
   on the worker threads: no loop over windows, bounded memory, and (measured) faster than one
   batch of the whole frame. The window mean is removed in the spectrum; the
   displacement is the correlation peak (Willert & Gharib 1991).
2. Between passes the vectors are checked with the normalised median test (Westerweel &
   Scarano 2005; vectors at an edge or beside a mask against straight-line extrapolations from
   their side), outliers replaced, the field lightly smoothed (predictor). Later passes deform
   both frames symmetrically by half the predictor, ``A'(x) = A(x - d(x)/2)``,
   ``B'(x) = B(x + d(x)/2)``, with cubic B-spline interpolation, and correlate the deformed
   windows for the correction (Scarano 2002, predictor-corrector). Where the predictor
   changes by no more than ``deform_min_change_px`` across a window (most of a typical frame),
   each block of one grid step is moved as a whole by half the predictor at its centre (each
   frame its way): a constant
   shift of the spline is a separable 4-tap filter, several times cheaper than resampling
   pixel by pixel, and a window of whole blocks sees the same mean shift. Only the windows
   with real gradients are resampled pixel by pixel (scipy's ``map_coordinates`` numbers,
   compiled: ``core.resample``).
3. The peak is refined by a three-point Gaussian fit per axis, after dividing the three samples
   by the overlap weight ``1 - |s|/D`` of a circular correlation of ``D``-wide windows (the
   bias of un-normalised FFT correlation, Westerweel 1997).

Ensembles: ``correlate_ensemble`` runs the same passes over several pairs of one flow (repeat
shots resampled into a common frame), summing their correlation planes window by window before
each peak search (Meinhart, Wereley & Santiago 2000); ``correlate_pair`` is its ensemble of one.

Masks: masked pixels are set to the window mean (they add nothing to the correlation). After
deformation a pixel excluded in either frame, or sampled from beyond the image, is excluded in
both. A partly masked window measures the flow at the centroid of its unmasked pixels; its
correction is added to the predictor carried from that centroid to the window centre.

Conventions: image coordinates (x = column right, y = row down, origin at the top-left pixel
centre); a window of ``D`` px starting at pixel ``j`` has its centre at ``j + (D - 1)/2``.

Known limit: cubic B-spline resampling of 2-3.5 px particle images shifts them slightly wrong
by an amount that depends on the fractional part of the half-displacement; on synthetic images
this leaves a periodic bias of up to about 0.015 px (zero at whole and half-pixel half-shifts).
Quintic resampling cuts it about threefold at twice the resampling cost.

Modules: ``correlate`` (the passes and the vector field), ``peaks`` (sub-pixel peak),
``grid`` (window grids, spline interpolation), ``predictor`` (between passes), ``deform``
(window deformation), ``validate`` (normalised median test, replacement). The settings records
are in ``core.settings`` (plain data the session store keeps without this package).
"""

from core.piv.correlate import BAND_WINDOWS, Cancelled, correlate_ensemble, correlate_pair
from core.piv.peaks import gaussian_peak_offset, parabolic_peak_offset
from core.settings import PivPass, PivSettings

__all__ = [
    "BAND_WINDOWS",
    "Cancelled",
    "PivPass",
    "PivSettings",
    "correlate_ensemble",
    "correlate_pair",
    "gaussian_peak_offset",
    "parabolic_peak_offset",
]
