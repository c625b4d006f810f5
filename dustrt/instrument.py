"""Spectrometer model: spectral sampling, resolution, field of view and noise.

The instrument turns a model spectral radiance L(λ) [W m⁻² sr⁻¹ nm⁻¹] into
expected photo-electrons per spectral bin, their noise, and a noisy
realisation.  Four independent pieces, each a plain broadcasting function:

* :func:`line_spread_matrix` — the linear operator that takes a spectrum on any
  sorted model wavelength grid to bin-averaged, resolution-limited values on
  the instrument's bins (box of one bin width convolved with a Gaussian
  line-spread function, integrated exactly against the piecewise-linear model).
* :func:`expected_counts` — signal, background (stray light), dark current,
  read noise, total noise, SNR and the radiance uncertainty per bin.
* :func:`simulate_noisy` — one Poisson + Gaussian realisation, calibrated
  (expected background and dark subtracted).
* :func:`field_of_view_offsets` / :func:`rotate_offsets_to` — a quadrature over
  the circular field of view for averaging radiance across the cone.

The count equation
------------------
For a bin of width Δλ centred on λ, the expected signal in electrons is

    S = L · A · Ω · Δλ · t · T(λ) / (h c / λ)

with A the aperture area [m²], Ω the field-of-view solid angle [sr],
t = frames × integration time [s], T the end-to-end throughput including the
detector's quantum efficiency, and hc/λ the photon energy [J] with λ in metres
[1, 2].  The noise adds Poisson variance of all collected electrons and
Gaussian read noise per frame [1, 2]:

    σ² = S + B + D + N_frames · σ_read²

References
----------
.. [1] Howell, S. B. (2006), *Handbook of CCD Astronomy*, 2nd ed., Cambridge
   University Press, §4.4 ("the CCD equation") (recalled from memory).
.. [2] McLean, I. S. (2008), *Electronic Imaging in Astronomy*, 2nd ed.,
   Springer, ch. 9 (signal-to-noise of a photon-counting detector)
   (recalled from memory).
.. [3] Abramowitz, M. & Stegun, I. A. (1964), *Handbook of Mathematical
   Functions*, NBS AMS 55, §25.4.29 (Gauss–Legendre quadrature) and §7.1
   (error function) (recalled from memory).
.. [4] Trefethen, L. N. & Weideman, J. A. C. (2014), "The exponentially
   convergent trapezoidal rule", SIAM Review 56, 385 (the equally spaced
   periodic trapezoid rule is exact for trigonometric polynomials of degree
   below the number of points) (recalled from memory).
.. [5] CODATA 2018 via ``scipy.constants``: h and c are exact in the 2019 SI.
"""

from __future__ import annotations

import csv
import math
import os
from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy import constants
from scipy.special import ndtr

# Gaussian FWHM = 2√(2 ln 2) σ.
_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
# Beyond this many σ past a bin's edge its response is < Φ(−12) ≈ 2e-33 of the
# peak: evaluating it there only adds round-off, so the response is clipped.
_RESPONSE_CLIP_SIGMA = 12.0
# An LSF narrower than this fraction of the bin width is treated as a pure box
# (its effect on the weights is far below double-precision relevance and the
# erf arguments would otherwise grow without bound).
_BOX_ONLY_SIGMA_FRACTION = 1.0e-9
# Slack allowed when a bin centre is compared with the ends of a throughput
# table, so a centre computed in floating point may sit on a table end [nm].
_TABLE_END_SLACK_NM = 1.0e-9


# ----------------------------------------------------------------- helpers


def _finite_scalar(value, name: str) -> float:
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a real number, got {value!r}") from None
    if not math.isfinite(out):
        raise ValueError(f"{name} must be finite, got {value!r}")
    return out


def _positive(value, name: str, unit: str) -> float:
    out = _finite_scalar(value, name)
    if out <= 0.0:
        raise ValueError(f"{name} must be > 0 {unit}, got {value!r}")
    return out


def _non_negative(value, name: str, unit: str) -> float:
    out = _finite_scalar(value, name)
    if out < 0.0:
        raise ValueError(f"{name} must be >= 0 {unit}, got {value!r}")
    return out


def _sorted_grid(values, name: str, min_points: int = 1) -> np.ndarray:
    arr = np.asarray(values, dtype=float)
    if arr.ndim != 1 or arr.size < min_points:
        raise ValueError(f"{name} must be a 1-D array of at least {min_points} value(s), got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite")
    if arr.size > 1 and np.any(np.diff(arr) <= 0.0):
        raise ValueError(f"{name} must be strictly increasing")
    return arr


def solid_angle_from_field_of_view(full_angle_deg: float) -> float:
    """Solid angle of a circular cone, Ω = 2π(1 − cos(θ/2)).

    Parameters
    ----------
    full_angle_deg : float
        FULL cone angle θ [deg], in (0, 180].

    Returns
    -------
    float
        Solid angle [sr].
    """
    theta = _finite_scalar(full_angle_deg, "field_of_view_deg")
    if not 0.0 < theta <= 180.0:
        raise ValueError(f"field_of_view_deg (full cone angle) must lie in (0, 180] deg, got {full_angle_deg!r}")
    # 1 − cos(x) = 2 sin²(x/2) keeps precision for tiny cones.
    return 4.0 * math.pi * math.sin(math.radians(theta) / 4.0) ** 2


def field_of_view_from_solid_angle(solid_angle_sr: float) -> float:
    """Full cone angle [deg] of a circular cone of solid angle Ω [sr] in (0, 2π]."""
    omega = _finite_scalar(solid_angle_sr, "solid_angle_sr")
    if not 0.0 < omega <= 2.0 * math.pi:
        raise ValueError(f"solid_angle_sr must lie in (0, 2π] sr, got {solid_angle_sr!r}")
    # Inverse of Ω = 4π sin²(θ/4).
    return math.degrees(4.0 * math.asin(min(1.0, math.sqrt(omega / (4.0 * math.pi)))))


# ---------------------------------------------------------------- instrument


@dataclass(frozen=True, kw_only=True)
class Instrument:
    """A UV–visible spectrometer looking at the limb.

    Give exactly one of ``solid_angle_sr`` and ``field_of_view_deg``; the
    other is derived (both may be given if they agree to 1e-9).  To change
    the field of view with ``dataclasses.replace``, set the other to None.
    All fields are keyword-only.

    Parameters
    ----------
    aperture_area_cm2 : float
        Collecting area [cm²], > 0.
    integration_time_s : float
        Exposure of one frame [s], > 0.
    bin_width_nm : float
        Width of one spectral bin [nm], > 0.
    resolution_fwhm_nm : float
        FWHM of the Gaussian line-spread function [nm], >= 0 (0: the bin box
        alone).
    wavelength_min_nm, wavelength_max_nm : float
        Detector spectral range [nm], 0 < min, min + bin width <= max.  Bin
        centres run from min + width/2 in steps of width; a partial bin at the
        red end is dropped.
    solid_angle_sr : float, optional
        Field-of-view solid angle [sr], in (0, 2π].
    field_of_view_deg : float, optional
        FULL cone angle of a circular field of view [deg], in (0, 180];
        Ω = 2π(1 − cos(θ/2)).
    frames : int
        Number of co-added frames, >= 1; total exposure = frames ×
        integration_time_s.  Default 1.
    throughput : float, (wavelength_nm, value) table, or callable
        End-to-end throughput including detector quantum efficiency [0–1].
        A float is constant (in (0, 1]); a table (two 1-D sequences, as from
        :func:`read_throughput_csv`) is interpolated linearly and must cover
        every bin centre; a callable ``f(wavelength_nm) -> values`` is sampled
        at the bin centres and stored as a table.  Default 1.
    read_noise_e : float
        Read noise per frame per bin [e⁻ rms], >= 0.  Default 0.
    dark_current_e_s : float
        Dark current per bin [e⁻ s⁻¹], >= 0.  Default 0.
    stray_light_fraction : float
        Fraction of ``stray_light_reference_radiance`` added to every bin as
        background, in [0, 1].  Default 0.
    stray_light_reference_radiance : float
        Reference radiance for stray light [W m⁻² sr⁻¹ nm⁻¹], >= 0 (e.g. the
        sunlit surface just below the limb).  Default 0.
    calibration_error_fraction : float
        Relative 1σ error of the radiometric calibration per bin (flat field,
        spectral response), in [0, 0.5].  Treated as noise uncorrelated between
        bins and realisations, σ_cal = f·(S + B) electrons, added in quadrature
        (common practice for a calibration floor; a real flat-field error is fixed
        for the instrument, so simulated realisations overstate its scatter between
        them while the per-spectrum uncertainty is right).  Default 0.

    Attributes
    ----------
    throughput_wavelength_nm, throughput_value : ndarray
        The stored throughput table; for a constant throughput the wavelength
        array is empty and the value array holds the single constant.
    bin_centres_nm : ndarray
        Centres of the spectral bins [nm].
    exposure_s : float
        frames × integration_time_s [s].
    """

    aperture_area_cm2: float
    integration_time_s: float
    bin_width_nm: float
    resolution_fwhm_nm: float
    wavelength_min_nm: float
    wavelength_max_nm: float
    solid_angle_sr: float | None = None
    field_of_view_deg: float | None = None
    frames: int = 1
    throughput: float | tuple | Callable = 1.0
    read_noise_e: float = 0.0
    dark_current_e_s: float = 0.0
    stray_light_fraction: float = 0.0
    stray_light_reference_radiance: float = 0.0
    calibration_error_fraction: float = 0.0

    def __post_init__(self):
        def put(name, value):
            object.__setattr__(self, name, value)

        put("aperture_area_cm2", _positive(self.aperture_area_cm2, "aperture_area_cm2", "cm²"))
        put("integration_time_s", _positive(self.integration_time_s, "integration_time_s", "s"))
        put("bin_width_nm", _positive(self.bin_width_nm, "bin_width_nm", "nm"))
        put("resolution_fwhm_nm", _non_negative(self.resolution_fwhm_nm, "resolution_fwhm_nm", "nm"))
        put("wavelength_min_nm", _positive(self.wavelength_min_nm, "wavelength_min_nm", "nm"))
        wmax = _finite_scalar(self.wavelength_max_nm, "wavelength_max_nm")
        if wmax < self.wavelength_min_nm + self.bin_width_nm:
            raise ValueError(
                "wavelength_max_nm must be >= wavelength_min_nm + bin_width_nm "
                f"= {self.wavelength_min_nm + self.bin_width_nm:g} nm (room for one bin), got {self.wavelength_max_nm!r}"
            )
        put("wavelength_max_nm", wmax)

        if self.solid_angle_sr is None and self.field_of_view_deg is None:
            raise ValueError("give solid_angle_sr (in (0, 2π] sr) or field_of_view_deg (full cone angle in (0, 180] deg)")
        if self.solid_angle_sr is None:
            put("solid_angle_sr", solid_angle_from_field_of_view(self.field_of_view_deg))
            put("field_of_view_deg", float(self.field_of_view_deg))
        elif self.field_of_view_deg is None:
            put("field_of_view_deg", field_of_view_from_solid_angle(self.solid_angle_sr))
            put("solid_angle_sr", float(self.solid_angle_sr))
        else:
            omega = float(self.solid_angle_sr)
            from_fov = solid_angle_from_field_of_view(self.field_of_view_deg)
            field_of_view_from_solid_angle(omega)  # range check
            if not math.isclose(omega, from_fov, rel_tol=1e-9):
                raise ValueError(
                    f"solid_angle_sr = {omega!r} sr disagrees with field_of_view_deg = {self.field_of_view_deg!r} "
                    f"(which gives {from_fov!r} sr); give only one of them"
                )
            put("solid_angle_sr", omega)
            put("field_of_view_deg", float(self.field_of_view_deg))

        frames = self.frames
        if isinstance(frames, (bool, np.bool_)) or not isinstance(frames, (int, np.integer)) or frames < 1:
            raise ValueError(f"frames must be an integer >= 1, got {frames!r}")
        put("frames", int(frames))

        put("read_noise_e", _non_negative(self.read_noise_e, "read_noise_e", "e⁻"))
        put("dark_current_e_s", _non_negative(self.dark_current_e_s, "dark_current_e_s", "e⁻/s"))
        fraction = _finite_scalar(self.stray_light_fraction, "stray_light_fraction")
        if not 0.0 <= fraction <= 1.0:
            raise ValueError(f"stray_light_fraction must lie in [0, 1], got {self.stray_light_fraction!r}")
        put("stray_light_fraction", fraction)
        put(
            "stray_light_reference_radiance",
            _non_negative(self.stray_light_reference_radiance, "stray_light_reference_radiance", "W m⁻² sr⁻¹ nm⁻¹"),
        )
        put("throughput", self._normalised_throughput(self.throughput))
        cal = _finite_scalar(self.calibration_error_fraction, "calibration_error_fraction")
        if not 0.0 <= cal <= 0.5:
            raise ValueError(f"calibration_error_fraction must lie in [0, 0.5], got {self.calibration_error_fraction!r}")
        put("calibration_error_fraction", cal)

    # Normalise to a float or a pair of float tuples, so the frozen instance
    # stays hashable, comparable and safe under dataclasses.replace.
    def _normalised_throughput(self, value):
        if callable(value):
            centres = self.bin_centres_nm
            sampled = np.asarray(value(centres), dtype=float)
            if sampled.shape != centres.shape:
                raise ValueError(
                    f"throughput callable must return one value per bin centre (shape {centres.shape}), "
                    f"got shape {sampled.shape}"
                )
            if centres.size == 1:
                value = float(sampled[0])
            else:
                value = (centres, sampled)
        if np.ndim(value) == 0:
            t = _finite_scalar(value, "throughput")
            if not 0.0 < t <= 1.0:
                raise ValueError(f"a constant throughput must lie in (0, 1], got {value!r}")
            return t
        try:
            wavelength, table = value
        except (TypeError, ValueError):
            raise ValueError(
                "throughput must be a float in (0, 1], a (wavelength_nm, value) table or a callable"
            ) from None
        wavelength = _sorted_grid(wavelength, "throughput wavelength_nm", min_points=2)
        table = np.asarray(table, dtype=float)
        if table.shape != wavelength.shape:
            raise ValueError(
                f"throughput table: value column has shape {table.shape}, wavelength_nm has {wavelength.shape}"
            )
        if not np.all(np.isfinite(table)) or np.any(table < 0.0) or np.any(table > 1.0):
            raise ValueError("throughput table values must lie in [0, 1]")
        centres = self.bin_centres_nm
        lo, hi = wavelength[0] - _TABLE_END_SLACK_NM, wavelength[-1] + _TABLE_END_SLACK_NM
        outside = centres[(centres < lo) | (centres > hi)]
        if outside.size:
            raise ValueError(
                f"throughput table covers [{wavelength[0]:g}, {wavelength[-1]:g}] nm but bin centres "
                f"{outside[0]:g}… ({outside.size} bins) lie outside it"
            )
        return (tuple(wavelength.tolist()), tuple(table.tolist()))

    # ------------------------------------------------------------ properties

    @property
    def n_bins(self) -> int:
        """Number of spectral bins."""
        span = (self.wavelength_max_nm - self.wavelength_min_nm) / self.bin_width_nm
        # The tiny slack keeps an exact fit (e.g. 300–310 nm in 2 nm bins) at 5.
        return int(math.floor(span * (1.0 + 1e-12)))

    @property
    def bin_centres_nm(self) -> np.ndarray:
        """Bin centres [nm]: wavelength_min_nm + (i + ½)·bin_width_nm."""
        return self.wavelength_min_nm + (np.arange(self.n_bins) + 0.5) * self.bin_width_nm

    @property
    def exposure_s(self) -> float:
        """Total exposure frames × integration_time_s [s]."""
        return self.frames * self.integration_time_s

    @property
    def throughput_wavelength_nm(self) -> np.ndarray:
        """Wavelengths of the throughput table [nm] (empty for a constant)."""
        if isinstance(self.throughput, float):
            return np.empty(0)
        return np.array(self.throughput[0])

    @property
    def throughput_value(self) -> np.ndarray:
        """Throughput table values [0–1] (one element for a constant)."""
        if isinstance(self.throughput, float):
            return np.array([self.throughput])
        return np.array(self.throughput[1])

    def throughput_at(self, wavelength_nm) -> np.ndarray:
        """Throughput at the given wavelengths [nm], linear in the table.

        Raises ValueError for wavelengths outside a tabulated throughput's range.
        """
        wl = np.asarray(wavelength_nm, dtype=float)
        if isinstance(self.throughput, float):
            return np.full(wl.shape, self.throughput)
        table_wl = self.throughput_wavelength_nm
        lo, hi = table_wl[0] - _TABLE_END_SLACK_NM, table_wl[-1] + _TABLE_END_SLACK_NM
        if np.any(~np.isfinite(wl)) or np.any(wl < lo) or np.any(wl > hi):
            raise ValueError(
                f"wavelength_nm must lie within the throughput table [{table_wl[0]:g}, {table_wl[-1]:g}] nm"
            )
        return np.interp(wl, table_wl, self.throughput_value)

    def line_spread_matrix(self, model_wavelength_nm, **kwargs) -> np.ndarray:
        """:func:`line_spread_matrix` for this instrument's bins, width and resolution."""
        return line_spread_matrix(
            model_wavelength_nm, self.bin_centres_nm, self.bin_width_nm, self.resolution_fwhm_nm, **kwargs
        )


def read_throughput_csv(path) -> tuple[np.ndarray, np.ndarray]:
    """Read a throughput table.

    The file is comma-separated with a header row naming (at least) the
    columns ``wavelength_nm`` and ``throughput``; lines starting with ``#``
    and blank lines are ignored; other columns are ignored.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV file.

    Returns
    -------
    wavelength_nm : ndarray
        Strictly increasing wavelengths [nm].
    throughput : ndarray
        Throughput [0–1].

    Raises
    ------
    ValueError
        Naming the file, and the column and line where relevant, if a column
        is missing, a value does not parse, a throughput is outside [0, 1],
        wavelengths are not strictly increasing, or fewer than 2 rows exist.
    """
    name = os.fspath(path)
    try:
        with open(name, newline="", encoding="utf-8") as handle:
            rows = [
                (number, row)
                for number, row in enumerate(csv.reader(handle), start=1)
                if row and any(cell.strip() for cell in row) and not row[0].lstrip().startswith("#")
            ]
    except UnicodeDecodeError as exc:
        raise ValueError(f"{name}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    except csv.Error as exc:
        raise ValueError(f"{name}: not a readable CSV table ({exc})") from None
    if not rows:
        raise ValueError(f"{name}: no header row (expected columns wavelength_nm, throughput)")
    header = [cell.strip() for cell in rows[0][1]]
    columns = {}
    for column in ("wavelength_nm", "throughput"):
        if column not in header:
            raise ValueError(f"{name}: missing column '{column}' (header is {header})")
        columns[column] = header.index(column)
    values = {column: [] for column in columns}
    for number, row in rows[1:]:
        for column, index in columns.items():
            cell = row[index].strip() if index < len(row) else ""
            try:
                value = float(cell)
            except ValueError:
                raise ValueError(f"{name}: line {number}, column '{column}': cannot read {cell!r} as a number") from None
            if not math.isfinite(value):
                raise ValueError(f"{name}: line {number}, column '{column}': value must be finite, got {cell!r}")
            if column == "throughput" and not 0.0 <= value <= 1.0:
                raise ValueError(f"{name}: line {number}, column 'throughput': {value:g} is outside [0, 1]")
            values[column].append(value)
    wavelength = np.array(values["wavelength_nm"])
    throughput = np.array(values["throughput"])
    if wavelength.size < 2:
        raise ValueError(f"{name}: need at least 2 data rows, got {wavelength.size}")
    if np.any(np.diff(wavelength) <= 0.0):
        raise ValueError(f"{name}: column 'wavelength_nm' must be strictly increasing")
    if wavelength[0] <= 0.0:
        raise ValueError(f"{name}: column 'wavelength_nm' must be > 0 nm")
    return wavelength, throughput


# --------------------------------------------------------- line spread


def _response_cdf_moment(offset_nm, half_width_nm: float, sigma_nm: float):
    """G(t) = ∫_{−∞}^{t} R and H(t) = ∫_{−∞}^{t} t' R dt' of one bin's response.

    ``offset_nm`` is t = λ − bin centre; R is the unit-area box of width
    2·half_width convolved with a Gaussian of standard deviation σ:
    R(t) = [Φ((t + h)/σ) − Φ((t − h)/σ)] / (2h).
    Uses ∫Φ(u) du = uΦ(u) + φ(u) and ∫uΦ(u) du = ((u² − 1)Φ(u) + uφ(u))/2
    (both vanish at −∞; check by differentiation) [3].
    """
    width = 2.0 * half_width_nm
    if sigma_nm <= _BOX_ONLY_SIGMA_FRACTION * width:
        t = np.clip(offset_nm, -half_width_nm, half_width_nm)
        return (t + half_width_nm) / width, (t * t - half_width_nm**2) / (2.0 * width)
    reach = half_width_nm + _RESPONSE_CLIP_SIGMA * sigma_nm
    t = np.clip(offset_nm, -reach, reach)
    ua = (t + half_width_nm) / sigma_nm
    ub = (t - half_width_nm) / sigma_nm
    pa, pb = ndtr(ua), ndtr(ub)
    da = np.exp(-0.5 * ua * ua) / math.sqrt(2.0 * math.pi)
    db = np.exp(-0.5 * ub * ub) / math.sqrt(2.0 * math.pi)
    i1a, i1b = ua * pa + da, ub * pb + db
    i2a, i2b = 0.5 * ((ua * ua - 1.0) * pa + ua * da), 0.5 * ((ub * ub - 1.0) * pb + ub * db)
    cdf = sigma_nm * (i1a - i1b) / width
    # λ' − c = σu − h on the first term and σu + h on the second.
    moment = (sigma_nm**2 * (i2a - i2b) - half_width_nm * sigma_nm * (i1a + i1b)) / width
    return cdf, moment


def line_spread_matrix(
    model_wavelength_nm,
    bin_centres_nm,
    bin_width_nm: float,
    fwhm_nm: float,
    *,
    min_coverage: float = 0.999,
    return_coverage: bool = False,
):
    """Linear operator from a model spectrum to instrument bin values.

    Row i gives bin i's value ∫ L(λ) R_i(λ) dλ, where R_i is the bin's
    response: a box of width Δλ around the bin centre convolved with a
    Gaussian line-spread function of the given FWHM, normalised to unit
    integral (analytically, a difference of error functions).  The model
    spectrum is taken as the piecewise-linear interpolant of its samples and
    the integral is done EXACTLY for that interpolant (closed-form integrals of
    Φ and uΦ), so the model grid may be coarse or non-uniform compared with
    the line-spread function.  ``matrix @ spectrum`` gives the bin values in
    the spectrum's own units.

    Edge handling (our choice): the part of a response beyond the model grid
    is truncated and each row is renormalised by its coverage (the fraction
    of its response inside the grid), so rows sum to 1 and a constant
    spectrum is preserved.  If any bin's coverage is below ``min_coverage`` a
    ValueError names the bin and the model range needed; a grid extending
    3 FWHM beyond the outer bin edges gives coverage > 1 − 1e-12.

    Parameters
    ----------
    model_wavelength_nm : array_like, shape (W,)
        Strictly increasing model wavelengths [nm], W >= 2.
    bin_centres_nm : array_like, shape (B,)
        Instrument bin centres [nm].
    bin_width_nm : float
        Bin width Δλ [nm], > 0.
    fwhm_nm : float
        Gaussian line-spread FWHM [nm], >= 0 (0: box only).
    min_coverage : float, keyword
        Smallest acceptable fraction of a bin's response inside the model
        grid, in (0, 1].  Default 0.999.
    return_coverage : bool, keyword
        Also return the coverage per bin.

    Returns
    -------
    matrix : ndarray, shape (B, W)
        Weights; rows sum to 1.
    coverage : ndarray, shape (B,)
        Only if ``return_coverage``: fraction of each response inside the grid.
    """
    x = _sorted_grid(model_wavelength_nm, "model_wavelength_nm", min_points=2)
    centres = np.asarray(bin_centres_nm, dtype=float)
    if centres.ndim != 1 or centres.size == 0 or not np.all(np.isfinite(centres)):
        raise ValueError(f"bin_centres_nm must be a non-empty finite 1-D array, got shape {centres.shape}")
    width = _positive(bin_width_nm, "bin_width_nm", "nm")
    fwhm = _non_negative(fwhm_nm, "fwhm_nm", "nm")
    min_coverage = _finite_scalar(min_coverage, "min_coverage")
    if not 0.0 < min_coverage <= 1.0:
        raise ValueError(f"min_coverage must lie in (0, 1], got {min_coverage!r}")
    sigma = fwhm / _FWHM_PER_SIGMA

    half_width = 0.5 * width
    # Beyond ±reach of a centre the clipped response CDF is constant, so model
    # intervals outside that window contribute exactly nothing: evaluate only
    # the window of each row, (B, K) with K ≪ W for fine model grids.
    reach = half_width if sigma <= _BOX_ONLY_SIGMA_FRACTION * width else half_width + _RESPONSE_CLIP_SIGMA * sigma
    n_model = x.size
    lo = np.maximum(np.searchsorted(x, centres - reach, side="right") - 1, 0)
    hi = np.minimum(np.searchsorted(x, centres + reach, side="left"), n_model - 1)
    window = int(np.max(hi - lo)) + 1
    index = lo[:, None] + np.arange(window)[None, :]
    inside = index < n_model
    index_c = np.minimum(index, n_model - 1)  # padding repeats the last node
    nodes = x[index_c]
    offsets = nodes - centres[:, None]
    cdf, moment = _response_cdf_moment(offsets, half_width, sigma)
    d_cdf = np.diff(cdf, axis=1)  # ∫ R over each model interval
    # ∫ (λ − x_j) R dλ over [x_j, x_{j+1}] = ΔH + (c − x_j)·ΔG.
    first_moment = np.diff(moment, axis=1) - offsets[:, :-1] * d_cdf
    step = np.diff(nodes, axis=1)
    # Padded (repeated) nodes have zero step and zero ΔG: give them no weight.
    upper = np.divide(first_moment, step, out=np.zeros_like(step), where=step > 0.0)  # right-node weight
    weights = np.zeros_like(offsets)
    weights[:, :-1] += d_cdf - upper
    weights[:, 1:] += upper
    matrix = np.zeros((centres.size, n_model))
    rows = np.broadcast_to(np.arange(centres.size)[:, None], index.shape)
    matrix[rows[inside], index[inside]] = weights[inside]

    coverage = matrix.sum(axis=1)  # = G(last node) − G(first node)
    bad = np.flatnonzero(coverage < min_coverage)
    if bad.size:
        i = bad[0]
        reach = half_width + 3.0 * fwhm
        raise ValueError(
            f"model_wavelength_nm [{x[0]:g}, {x[-1]:g}] nm covers only {coverage[i]:.4g} of the response of "
            f"the bin at {centres[i]:g} nm ({bad.size} bins below min_coverage = {min_coverage:g}); "
            f"extend the model grid to at least [{centres.min() - reach:g}, {centres.max() + reach:g}] nm"
        )
    matrix /= coverage[:, None]
    if return_coverage:
        return matrix, coverage
    return matrix


# ------------------------------------------------------------------ counts


@dataclass(frozen=True, eq=False)
class CountsResult:
    """Expected electrons and noise per bin (all arrays share one shape).

    Attributes
    ----------
    signal_e : ndarray
        Expected signal from the radiance passed in [e⁻].
    background_e : ndarray
        Expected background: stray light plus any background radiance [e⁻].
    dark_e : ndarray
        Expected dark-current electrons over the total exposure [e⁻].
    read_noise_e : ndarray
        Read noise over all co-added frames, √frames · σ_read [e⁻ rms].
    calibration_e : ndarray
        Calibration error f·(S + B) [e⁻ rms] (0 unless the instrument has one).
    noise_e : ndarray
        Total noise √(S + B + D + frames·σ_read² + calibration_e²) [e⁻ rms].
    snr : ndarray
        signal_e / noise_e (0 where both are 0).
    radiance_uncertainty : ndarray
        noise_e in calibrated radiance [W m⁻² sr⁻¹ nm⁻¹] (inf where the
        throughput is 0).
    radiance_per_electron : ndarray
        Calibration factor L/S per bin [W m⁻² sr⁻¹ nm⁻¹ per e⁻].
    """

    signal_e: np.ndarray
    background_e: np.ndarray
    dark_e: np.ndarray
    read_noise_e: np.ndarray
    noise_e: np.ndarray
    snr: np.ndarray
    radiance_uncertainty: np.ndarray
    radiance_per_electron: np.ndarray
    calibration_e: np.ndarray | float = 0.0

    def simulate(self, rng: np.random.Generator, n_realisations: int | None = None) -> np.ndarray:
        """:func:`simulate_noisy` with this result's expectations [e⁻]."""
        return simulate_noisy(
            self.signal_e, self.background_e, self.dark_e, self.read_noise_e, rng, n_realisations=n_realisations,
            calibration_e=self.calibration_e,
        )


def _check_bins(bin_centres_nm) -> np.ndarray:
    centres = np.asarray(bin_centres_nm, dtype=float)
    if centres.ndim != 1 or centres.size == 0:
        raise ValueError(f"bin_centres_nm must be a non-empty 1-D array, got shape {centres.shape}")
    if not np.all(np.isfinite(centres)) or np.any(centres <= 0.0):
        raise ValueError("bin_centres_nm must be finite and > 0 nm")
    return centres


def _electrons_per_radiance(centres: np.ndarray, instrument: Instrument) -> np.ndarray:
    """A·Ω·Δλ·t·T/(hc/λ): electrons per unit radiance [e⁻ per W m⁻² sr⁻¹ nm⁻¹]."""
    if not isinstance(instrument, Instrument):
        raise ValueError(f"instrument must be an Instrument, got {type(instrument).__name__}")
    photon_energy_j = constants.h * constants.c / (centres * 1e-9)  # λ in m [5]
    area_m2 = instrument.aperture_area_cm2 * 1e-4
    etendue = area_m2 * instrument.solid_angle_sr * instrument.bin_width_nm * instrument.exposure_s
    return etendue * instrument.throughput_at(centres) / photon_energy_j  # [1], §4.4


def radiance_per_electron(bin_centres_nm, instrument: Instrument) -> np.ndarray:
    """Calibration factor: radiance per detected electron in each bin.

    Parameters
    ----------
    bin_centres_nm : array_like, shape (B,)
        Bin centres [nm], > 0.
    instrument : Instrument

    Returns
    -------
    ndarray, shape (B,)
        (hc/λ) / (A Ω Δλ t T) [W m⁻² sr⁻¹ nm⁻¹ per e⁻]; inf where T = 0.
    """
    k = _electrons_per_radiance(_check_bins(bin_centres_nm), instrument)
    return np.divide(1.0, k, out=np.full(k.shape, np.inf), where=k > 0.0)


def electrons_to_radiance(electrons, bin_centres_nm, instrument: Instrument) -> np.ndarray:
    """Convert calibrated electrons (..., B) to radiance [W m⁻² sr⁻¹ nm⁻¹]."""
    factor = radiance_per_electron(bin_centres_nm, instrument)
    electrons = np.asarray(electrons, dtype=float)
    if electrons.ndim == 0 or electrons.shape[-1] != factor.size:
        raise ValueError(f"electrons must have a last axis of {factor.size} bins, got shape {electrons.shape}")
    return electrons * factor


def _radiance_array(value, name: str) -> np.ndarray:
    arr = np.asarray(value, dtype=float)
    # NaN propagates (a missing model value stays missing); negative or
    # infinite radiance is an input error.
    if np.any(np.isinf(arr)) or np.any(arr < 0.0):
        raise ValueError(f"{name} must be >= 0 and finite [W m⁻² sr⁻¹ nm⁻¹]")
    return arr


def expected_counts(
    radiance_w_m2_sr_nm, bin_centres_nm, instrument: Instrument, background_radiance=None
) -> CountsResult:
    """Expected electrons, noise and SNR per spectral bin.

    Parameters
    ----------
    radiance_w_m2_sr_nm : array_like, shape (..., B)
        Bin-averaged signal radiance (dust plus whatever else is to count as
        signal, e.g. zodiacal light) [W m⁻² sr⁻¹ nm⁻¹], >= 0; NaN propagates.
    bin_centres_nm : array_like, shape (B,)
        Bin centres [nm] (usually ``instrument.bin_centres_nm``).
    instrument : Instrument
    background_radiance : array_like, optional
        Extra background radiance broadcastable to the radiance
        [W m⁻² sr⁻¹ nm⁻¹], >= 0: adds noise and is subtracted on calibration
        but is not signal.  Stray light (fraction × reference radiance) is
        always added to it.

    Returns
    -------
    CountsResult
        Arrays of the broadcast shape (..., B).

    References
    ----------
    [1] §4.4, [2] ch. 9 (module docstring).
    """
    if not isinstance(instrument, Instrument):
        raise ValueError(f"instrument must be an Instrument, got {type(instrument).__name__}")
    centres = _check_bins(bin_centres_nm)
    radiance = _radiance_array(radiance_w_m2_sr_nm, "radiance_w_m2_sr_nm")
    if radiance.ndim == 0 or radiance.shape[-1] != centres.size:
        raise ValueError(
            f"radiance_w_m2_sr_nm must have a last axis of {centres.size} bins (bin_centres_nm), got shape {radiance.shape}"
        )
    background = np.full(centres.shape, instrument.stray_light_fraction * instrument.stray_light_reference_radiance)
    if background_radiance is not None:
        extra = _radiance_array(background_radiance, "background_radiance")
        try:
            np.broadcast_shapes(extra.shape, radiance.shape)
        except ValueError:
            raise ValueError(
                f"background_radiance of shape {extra.shape} does not broadcast to the radiance shape {radiance.shape}"
            ) from None
        background = background + extra
    shape = np.broadcast_shapes(radiance.shape, background.shape)

    k = _electrons_per_radiance(centres, instrument)
    signal = np.broadcast_to(radiance * k, shape).copy()
    background_e = np.broadcast_to(background * k, shape).copy()
    dark = np.full(shape, instrument.dark_current_e_s * instrument.exposure_s)
    read = np.full(shape, math.sqrt(instrument.frames) * instrument.read_noise_e)
    calibration = instrument.calibration_error_fraction * (signal + background_e)
    noise = np.sqrt(signal + background_e + dark + read**2 + calibration**2)
    snr = np.divide(signal, noise, out=np.zeros(shape), where=noise > 0.0)
    per_e = np.broadcast_to(radiance_per_electron(centres, instrument), shape).copy()
    uncertainty = np.where(np.isfinite(per_e), noise * np.where(np.isfinite(per_e), per_e, 0.0), np.inf)
    return CountsResult(
        signal_e=signal,
        background_e=background_e,
        dark_e=dark,
        read_noise_e=read,
        noise_e=noise,
        snr=snr,
        radiance_uncertainty=uncertainty,
        radiance_per_electron=per_e,
        calibration_e=calibration,
    )


def simulate_noisy(
    expected_signal_e,
    background_e,
    dark_e,
    read_noise_total_e,
    rng: np.random.Generator,
    *,
    n_realisations: int | None = None,
    calibration_e=0.0,
) -> np.ndarray:
    """One calibrated noisy realisation of the detected signal [e⁻].

    Draws Poisson(signal + background + dark) + Normal(0, read noise) +
    Normal(0, calibration error) and subtracts the expected background and
    dark, as a calibration would; the result scatters around the expected
    signal with variance noise_e².

    Parameters
    ----------
    expected_signal_e, background_e, dark_e : array_like
        Expected electrons [e⁻], >= 0, mutually broadcastable.
    read_noise_total_e : array_like
        Read noise over all frames (√frames · σ_read) [e⁻ rms], >= 0.
    rng : numpy.random.Generator
        Source of randomness (pass a seeded one for reproducibility).
    n_realisations : int, optional, keyword
        If given, a leading axis of this many independent realisations.
    calibration_e : array_like, optional, keyword
        Calibration error [e⁻ rms], >= 0, broadcastable (default 0).

    Returns
    -------
    ndarray
        Calibrated electrons, shape ([n_realisations,] broadcast shape).
    """
    if not isinstance(rng, np.random.Generator):
        raise ValueError(f"rng must be a numpy.random.Generator, got {type(rng).__name__}")
    arrays = []
    for name, value in (
        ("expected_signal_e", expected_signal_e),
        ("background_e", background_e),
        ("dark_e", dark_e),
        ("read_noise_total_e", read_noise_total_e),
    ):
        arr = np.asarray(value, dtype=float)
        if not np.all(np.isfinite(arr)) or np.any(arr < 0.0):
            raise ValueError(f"{name} must be finite and >= 0 [e⁻]")
        arrays.append(arr)
    cal = np.asarray(calibration_e, dtype=float)
    if not np.all(np.isfinite(cal)) or np.any(cal < 0.0):
        raise ValueError("calibration_e must be finite and >= 0 [e⁻]")
    try:
        signal, background, dark, read, cal = np.broadcast_arrays(*arrays, cal)
    except ValueError:
        raise ValueError("expected_signal_e, background_e, dark_e, read_noise_total_e and calibration_e must "
                         "broadcast together") from None
    shape = signal.shape
    if n_realisations is not None:
        if isinstance(n_realisations, bool) or not isinstance(n_realisations, (int, np.integer)) or n_realisations < 1:
            raise ValueError(f"n_realisations must be an integer >= 1, got {n_realisations!r}")
        shape = (int(n_realisations),) + shape
    collected = rng.poisson(np.broadcast_to(signal + background + dark, shape)).astype(float)
    readout = rng.normal(0.0, 1.0, size=shape) * read
    if np.any(cal > 0):
        readout = readout + rng.normal(0.0, 1.0, size=shape) * cal
    return collected + readout - background - dark


# ------------------------------------------------------------ field of view


def field_of_view_offsets(full_angle_deg: float, n_rings: int) -> tuple[np.ndarray, np.ndarray]:
    """Quadrature over a circular cone around +z (uniform response).

    Gauss–Legendre in μ = cos(off-axis angle) on [cos(θ/2), 1] with
    ``n_rings`` nodes [3], times the equally spaced trapezoid rule in azimuth
    with 2·n_rings points per ring [4].  Since dΩ = dμ dφ, the weights are the
    solid-angle fractions and sum to 1.

    Exactness: the cone mean of any polynomial in the direction components
    (x, y, z) of total degree <= 2·n_rings − 1 is exact (azimuth: trigonometric
    degree <= 2n − 1 < 2n points; polar: the surviving even powers of
    sin α = √(1 − μ²) give a polynomial in μ of degree <= 2n − 1).  Any
    function g(α)·cos(kφ) or g(α)·sin(kφ) with 1 <= k < 2n averages to
    exactly 0, so a function linear in the angular offset (α cos φ, α sin φ)
    averages to its central value.

    Parameters
    ----------
    full_angle_deg : float
        FULL cone angle [deg], in (0, 180].
    n_rings : int
        Gauss–Legendre nodes in cos(off-axis angle), >= 1.

    Returns
    -------
    directions_offset : ndarray, shape (2·n_rings², 3)
        Unit vectors inside the cone.
    weights : ndarray, shape (2·n_rings²,)
        Non-negative, summing to 1.
    """
    theta = _finite_scalar(full_angle_deg, "full_angle_deg")
    if not 0.0 < theta <= 180.0:
        raise ValueError(f"full_angle_deg must lie in (0, 180] deg, got {full_angle_deg!r}")
    if isinstance(n_rings, bool) or not isinstance(n_rings, (int, np.integer)) or not 1 <= n_rings <= 200:
        raise ValueError(f"n_rings must be an integer in [1, 200], got {n_rings!r}")
    n_rings = int(n_rings)
    n_azimuth = 2 * n_rings
    half = math.radians(theta) / 2.0
    one_minus_mu0 = 2.0 * math.sin(half / 2.0) ** 2  # 1 − cos(half), precise for tiny cones
    nodes, gl_weights = np.polynomial.legendre.leggauss(n_rings)
    # Map [−1, 1] → [μ0, 1]; keep 1 − μ (not μ) to retain precision near the axis.
    one_minus_mu = 0.5 * one_minus_mu0 * (1.0 - nodes)
    mu = 1.0 - one_minus_mu
    sin_alpha = np.sqrt(one_minus_mu * (2.0 - one_minus_mu))
    phi = 2.0 * np.pi * np.arange(n_azimuth) / n_azimuth
    directions = np.empty((n_rings, n_azimuth, 3))
    directions[..., 0] = sin_alpha[:, None] * np.cos(phi)[None, :]
    directions[..., 1] = sin_alpha[:, None] * np.sin(phi)[None, :]
    directions[..., 2] = mu[:, None]
    # GL weights sum to 2; each ring's share is split evenly in azimuth.
    weights = np.repeat(0.5 * gl_weights / n_azimuth, n_azimuth)
    return directions.reshape(-1, 3), weights


def rotate_offsets_to(look_direction, offsets) -> np.ndarray:
    """Rotate cone offsets about +z onto given central look directions.

    The rotation taking +z to each look direction l̂ is the shortest one
    (Rodrigues' formula); for looks in the −z hemisphere it is composed with
    a half-turn about x to stay well conditioned.  Any rotation with
    R·ẑ = l̂ preserves the cone and its quadrature exactness.

    Parameters
    ----------
    look_direction : array_like, shape (3,) or (L, 3)
        Central look directions (normalised here; must be non-zero, finite).
    offsets : array_like, shape (Q, 3)
        Directions about +z, e.g. from :func:`field_of_view_offsets`.

    Returns
    -------
    ndarray, shape (Q, 3) for one look or (L, Q, 3)
        Rotated directions.
    """
    looks = np.asarray(look_direction, dtype=float)
    single = looks.ndim == 1
    looks = np.atleast_2d(looks)
    if looks.ndim != 2 or looks.shape[1] != 3:
        raise ValueError(f"look_direction must have shape (3,) or (L, 3), got {np.shape(look_direction)}")
    offs = np.asarray(offsets, dtype=float)
    if offs.ndim != 2 or offs.shape[1] != 3 or not np.all(np.isfinite(offs)):
        raise ValueError(f"offsets must be a finite array of shape (Q, 3), got {np.shape(offsets)}")
    norm = np.linalg.norm(looks, axis=1)
    if not np.all(np.isfinite(norm)) or np.any(norm == 0.0):
        raise ValueError("look_direction must be finite and non-zero")
    looks = looks / norm[:, None]

    flip = looks[:, 2] < 0.0
    target = np.where(flip[:, None], -looks, looks)  # target has z >= 0
    lx, ly, lz = target[:, 0], target[:, 1], target[:, 2]
    inv = 1.0 / (1.0 + lz)
    rot = np.empty((looks.shape[0], 3, 3))
    # Shortest rotation ẑ → target: I + [v]× + [v]×²/(1 + c), v = ẑ × target.
    rot[:, 0, 0] = 1.0 - lx * lx * inv
    rot[:, 0, 1] = -lx * ly * inv
    rot[:, 0, 2] = lx
    rot[:, 1, 0] = -lx * ly * inv
    rot[:, 1, 1] = 1.0 - ly * ly * inv
    rot[:, 1, 2] = ly
    rot[:, 2, 0] = -lx
    rot[:, 2, 1] = -ly
    rot[:, 2, 2] = lz
    # For −z-hemisphere looks: R = R_shortest(ẑ → −l̂) · diag(1, −1, −1), so R ẑ = l̂.
    rot[flip, :, 1:] *= -1.0
    out = np.einsum("lij,qj->lqi", rot, offs)
    return out[0] if single else out
