"""Scenario files: TOML → validated, frozen dataclasses, in one place.

Every error is a :class:`ScenarioError` naming the file, the key (a dotted
path such as ``population[0].size.sigma_g``) and what is allowed.  Relative
file paths inside a scenario are relative to the scenario file.

The tables and keys are documented in ``dustrt/data/scenario_reference.toml``,
a fully commented scenario shipped with the package.
"""

from __future__ import annotations

import copy
import math
import re
import tomllib
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from dustrt.constants import MOON_RADIUS_KM


class ScenarioError(ValueError):
    """A scenario file is invalid; the message names file, key and what is allowed.

    ``key`` is the dotted key of a single problem; ``problems`` lists every
    problem's message when a whole scenario was validated at once.
    """

    def __init__(self, message: str, key: str | None = None, problems: list[str] | None = None):
        super().__init__(message)
        self.key = key
        self.problems = list(problems) if problems else [message]


class _Reported(Exception):
    """A table had problems that are already recorded; stop building it."""


class _Problems:
    """Every problem found while validating one scenario (one per key)."""

    def __init__(self, source: str):
        self.source = source
        self.messages: list[str] = []
        self.keys: set[str] = set()

    def add(self, exc: ScenarioError) -> None:
        # a later complaint about a key already reported is a consequence of the first one
        if exc.key is not None:
            if exc.key in self.keys:
                return
            self.keys.add(exc.key)
        self.messages.append(str(exc))

    def has(self, key: str) -> bool:
        return key in self.keys

    @contextmanager
    def guard(self):
        """Record a problem raised inside and carry on with the next part of the scenario."""
        try:
            yield
        except _Reported:
            pass
        except ScenarioError as exc:
            self.add(exc)

    def raise_if_any(self) -> None:
        if not self.messages:
            return
        if len(self.messages) == 1:
            raise ScenarioError(self.messages[0], problems=self.messages)
        lines = "\n".join(f"  {m}" for m in self.messages)
        raise ScenarioError(f"{len(self.messages)} problems in {self.source}:\n{lines}", problems=self.messages)


# ---------------------------------------------------------------- validation helpers


class _Table:
    """A TOML table being read: tracks used keys so unknown ones can be rejected."""

    def __init__(self, data: dict, key: str, source: str, base_dir: Path, problems: _Problems | None = None):
        self.data = data
        self.key = key
        self.source = source
        self.base_dir = base_dir
        self.used: set[str] = set()
        self.problems = problems if problems is not None else _Problems(source)
        self.bad = False  # a value here was rejected (and recorded); the table is not built

    def child(self, data: dict, key: str) -> "_Table":
        return _Table(data, key, self.source, self.base_dir, self.problems)

    def _collect(self, read, fallback):
        """Read one value; a bad one is recorded and replaced by ``fallback`` so reading goes on."""
        try:
            return read()
        except _Reported:
            raise
        except ScenarioError as exc:
            self.problems.add(exc)
            self.bad = True
            return fallback

    def _unknown_hint(self) -> str:
        """Mention keys not (yet) recognised here: a missing key is often a misspelt one."""
        known = set(self.used)
        for k in _KNOWN_KEYS:
            known.add(k)
        odd = sorted(k for k in self.data if k not in known)
        return f"; unrecognised key(s) here: {', '.join(odd)}" if odd else ""

    def error(self, subkey: str | None, message: str) -> ScenarioError:
        where = self.key if subkey is None else (f"{self.key}.{subkey}" if self.key else subkey)
        return ScenarioError(f"{self.source}: key '{where}': {message}", key=where)

    def report(self, subkey: str | None, message: str) -> None:
        """Record a problem and keep reading the table (it will not be built)."""
        self.problems.add(self.error(subkey, message))
        self.bad = True

    def has(self, name: str) -> bool:
        return name in self.data

    def raw(self, name: str, default: Any = None) -> Any:
        self.used.add(name)
        return self.data.get(name, default)

    def number(self, name, default=None, **limits) -> float | None:
        fallback = math.nan if default is _REQUIRED else default
        return self._collect(lambda: self._number(name, default, **limits), fallback)

    def _number(self, name, default=None, *, low=-math.inf, high=math.inf, low_open=False,
                high_open=False, integer=False) -> float | None:
        self.used.add(name)
        if name not in self.data:
            if default is _REQUIRED:
                raise self.error(name, "is required" + (
                    f", in {_range_text(low, high, low_open, high_open)}" if max(abs(low), abs(high)) < 1e29 else "")
                    + self._unknown_hint())
            return default
        v = self.data[name]
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise self.error(name, f"must be a number, got {type(v).__name__} {v!r}")
        if integer and (isinstance(v, float) and not v.is_integer()):
            raise self.error(name, f"must be an integer, got {v!r}")
        v = int(v) if integer else float(v)
        ok = math.isfinite(v) and (v > low if low_open else v >= low) and (
            v < high if high_open else v <= high)
        if not ok:
            raise self.error(name, f"must lie in {_range_text(low, high, low_open, high_open)}, got {v!r}")
        return v

    def boolean(self, name, default) -> bool:
        return self._collect(lambda: self._boolean(name, default), default)

    def _boolean(self, name, default) -> bool:
        self.used.add(name)
        v = self.data.get(name, default)
        if not isinstance(v, bool):
            raise self.error(name, f"must be true or false, got {v!r}")
        return v

    def string(self, name, default=None, choices=None) -> str | None:
        """A string (one of ``choices``).  A bad optional one is recorded and reading goes on;
        a bad required one stops the table (what follows usually depends on it)."""
        if default is _REQUIRED:
            return self._string(name, default, choices)
        return self._collect(lambda: self._string(name, default, choices), default)

    def _string(self, name, default, choices) -> str | None:
        self.used.add(name)
        if name not in self.data:
            if default is _REQUIRED:
                raise self.error(name, "is required" + (f" (one of {', '.join(choices)})" if choices else ""))
            return default
        v = self.data[name]
        if not isinstance(v, str):
            raise self.error(name, f"must be a string, got {v!r}")
        if choices is not None and v not in choices:
            raise self.error(name, f"must be one of {', '.join(repr(c) for c in choices)}, got {v!r}")
        return v

    def number_list(self, name, **limits) -> np.ndarray:
        return self._collect(lambda: self._number_list(name, **limits), np.full(1, np.nan))

    def _number_list(self, name, *, low=-math.inf, high=math.inf, low_open=False, min_len=1):
        self.used.add(name)
        v = self.data[name]
        if not isinstance(v, list) or len(v) < min_len or any(
                isinstance(x, bool) or not isinstance(x, (int, float)) for x in v):
            raise self.error(name, f"must be a list of at least {min_len} number(s), got {v!r}")
        arr = np.asarray(v, dtype=float)
        bad = ~np.isfinite(arr) | ((arr <= low) if low_open else (arr < low)) | (arr > high)
        if np.any(bad):
            raise self.error(name, f"values must lie in {_range_text(low, high, low_open, False)}, "
                                   f"got {arr[bad][0]!r}")
        return arr

    def subtable(self, name, required=False) -> "_Table | None":
        self.used.add(name)
        if name not in self.data:
            if required:
                raise self.error(name, "is required (a table)")
            return None
        v = self.data[name]
        if not isinstance(v, dict):
            raise self.error(name, f"must be a table, got {v!r}")
        return self.child(v, f"{self.key}.{name}" if self.key else name)

    def path(self, name) -> Path:
        v = self.string(name, _REQUIRED)
        p = Path(v)
        if not p.is_absolute():
            p = self.base_dir / p
        if not p.is_file():
            raise self.error(name, f"file not found: {p}")
        return p

    def finish(self, allowed_hint: str | None = None) -> None:
        """Record unknown keys; stop building this table if any of its values was rejected."""
        known = allowed_hint or ", ".join(sorted(self.used))
        for name in sorted(set(self.data) - self.used):
            self.problems.add(self.error(name, f"unknown key; allowed keys here: {known}"))
            self.bad = True
        if self.bad:
            raise _Reported


_KNOWN_KEYS = {
    "values_nm", "start_nm", "stop_nm", "step_nm", "scattering_angles_deg", "relative_tolerance", "name",
    "material", "size", "density", "n", "k", "table", "distribution", "radius_um", "median_radius_um", "sigma_g",
    "min_radius_um", "max_radius_um", "slope", "profile", "surface_density_cm3", "scale_height_km",
    "reference_altitude_km", "exponent", "sunlit_width_km", "dark_width_km", "offset_km", "floor_fraction",
    "file", "scale", "radius_km", "distance_au", "spectrum", "altitude_km", "latitude_deg", "local_time_h",
    "solar_zenith_deg", "side", "tangent_altitudes_km", "azimuth_deg", "directions", "top_altitude_km",
    "extinction", "zodiacal_light", "zodiacal_scale", "dark_surface_radiance_factor", "aperture_area_cm2",
    "field_of_view_deg", "solid_angle_sr", "integration_time_s", "frames", "bin_width_nm", "resolution_fwhm_nm",
    "wavelength_min_nm", "wavelength_max_nm", "throughput", "read_noise_e", "dark_current_e_s",
    "stray_light_fraction", "stray_light_reference_radiance_w_m2_sr_nm", "field_of_view_rings",
    "calibration_error_fraction", "blue_band_nm",
    "red_band_nm", "fit_bands_nm", "mask_nm", "free_colour_slope", "joint_fit", "zodiacal_colour_order", "confidence", "method", "detection_sigma",
    "chunk_size", "start", "stop", "num", "step", "spacing",
}


class _Required:
    def __repr__(self):
        return "REQUIRED"


_REQUIRED = _Required()


def _range_text(low, high, low_open, high_open) -> str:
    lo = "(" if low_open else "["
    hi = ")" if high_open else "]"
    return f"{lo}{low:g}, {high:g}{hi}"


def _grid(table: _Table, name: str, *, low, high, low_open=False, integer_num=True) -> np.ndarray:
    """A list of numbers, or {start, stop, num} (linear) / {start, stop, step}."""
    v = table.raw(name)
    if isinstance(v, list):
        return table.number_list(name, low=low, high=high, low_open=low_open)
    if isinstance(v, dict):
        sub = table.child(v, f"{table.key}.{name}" if table.key else name)
        start = sub.number("start", _REQUIRED, low=low, high=high, low_open=low_open)
        stop = sub.number("stop", _REQUIRED, low=low, high=high, low_open=low_open)
        spacing = sub.string("spacing", "linear", choices=("linear", "log"))
        if sub.has("step"):
            step = sub.number("step", _REQUIRED, low=0, low_open=True)
            sub.finish("start, stop, step, spacing")
            n = int(math.floor((stop - start) / step + 1e-9)) + 1
            if n < 1:
                raise sub.error("stop", "must be >= start")
            return start + step * np.arange(n)
        num = sub.number("num", _REQUIRED, low=1, high=1e6, integer=True)
        sub.finish("start, stop, num (or step), spacing")
        if spacing == "log":
            if start <= 0 or stop <= 0:
                raise sub.error("start", "log spacing needs start and stop > 0")
            return np.geomspace(start, stop, num)
        return np.linspace(start, stop, num)
    raise table.error(name, f"must be a list of numbers or a table {{start, stop, num}}, got {v!r}")


# ---------------------------------------------------------------- scenario dataclasses


@dataclass(frozen=True)
class Population:
    name: str
    material: Any  # dustrt.materials.Material
    size: Any  # dustrt.sizes distribution
    density: Any = None  # dustrt.density profile


@dataclass(frozen=True)
class Observer:
    altitude_km: float
    latitude_deg: float
    local_time_h: float


@dataclass(frozen=True)
class View:
    tangent_altitudes_km: np.ndarray | None
    azimuth_deg: float
    directions: np.ndarray | None  # (L, 3) unit vectors, when given explicitly


@dataclass(frozen=True)
class Integration:
    top_altitude_km: float = 300.0
    relative_tolerance: float = 1e-4
    extinction: bool = True


@dataclass(frozen=True)
class Background:
    zodiacal_light: bool = True
    zodiacal_scale: float = 1.0
    dark_surface_radiance_factor: float = 0.0


@dataclass(frozen=True)
class Separation:
    blue_band_nm: tuple[float, float] = (380.0, 450.0)
    red_band_nm: tuple[float, float] = (600.0, 700.0)
    fit_bands_nm: tuple = ()
    mask_nm: tuple = ()
    free_colour_slope: bool = False
    joint_fit: bool = False  # all populations in one fit (else one hypothesis at a time)
    zodiacal_colour_order: int = 0  # polynomial order in ln(λ/500 nm) of the zodiacal colour terms

    @property
    def colour_order(self) -> int:
        """Free zodiacal colour terms: the polynomial order, at least 1 with free_colour_slope."""
        return max(self.zodiacal_colour_order, 1 if self.free_colour_slope else 0)


@dataclass(frozen=True)
class Limits:
    confidence: float = 0.95
    method: str = "feldman-cousins"


@dataclass(frozen=True)
class Sweep:
    axes: tuple  # ((key, values ndarray), ...)
    detection_sigma: float = 5.0
    chunk_size: int = 0  # 0: automatic


@dataclass(frozen=True)
class Scenario:
    """A validated scenario.  ``raw`` is the parsed TOML (for sweeps and provenance)."""

    source: str
    text: str
    raw: dict = field(repr=False)
    base_dir: Path
    wavelength_nm: np.ndarray
    scattering_angle_deg: np.ndarray
    optics_relative_tolerance: float
    populations: tuple
    body_radius_km: float = MOON_RADIUS_KM
    sun_distance_au: float = 1.0
    solar_spectrum: str | Path = "builtin"
    observer: Observer | None = None
    view: View | None = None
    integration: Integration = Integration()
    background: Background = Background()
    instrument: Any = None
    separation: Separation = Separation()
    limits: Limits = Limits()
    sweep: Sweep | None = None

    def population(self, name: str) -> Population:
        for p in self.populations:
            if p.name == name:
                return p
        raise KeyError(name)

    def require(self, *needs: str) -> None:
        """Raise, listing everything missing, unless the tables that ``needs`` ("limb",
        "instrument") ask for are present."""
        problems = _Problems(self.source)

        def missing(key, message):
            problems.add(ScenarioError(f"{self.source}: key '{key}': {message}", key=key))

        if "limb" in needs:
            for t, v in (("observer", self.observer), ("view", self.view)):
                if v is None:
                    missing(t, "table is required for the limb model")
            for i, p in enumerate(self.populations):
                if p.density is None:
                    missing(f"population[{i}].density", "is required for the limb model "
                                                        "(profile = exponential | power-law | terminator | table)")
        if "instrument" in needs and self.instrument is None:
            missing("instrument", "table is required for this command")
        problems.raise_if_any()


TOP_LEVEL = ("wavelengths", "optics", "population", "body", "sun", "observer", "view",
             "integration", "background", "instrument", "separation", "limits", "sweep")


def demo_scenario_path() -> Path:
    """Path of the packaged demo scenario (an invented orbiter, demo values)."""
    from importlib import resources

    return Path(str(resources.files("dustrt") / "data" / "demo_scenario.toml"))


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file (``"demo"``: the packaged demo scenario)."""
    path = demo_scenario_path() if str(path) == "demo" else Path(path)
    if not path.is_file():
        raise ScenarioError(f"{path}: scenario file not found")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise ScenarioError(f"{path}: scenario file is not UTF-8 text") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{path}: not valid TOML: {exc}") from None
    return scenario_from_dict(raw, source=str(path.resolve()), base_dir=path.parent.resolve(), text=text)


def scenario_from_dict(raw: dict, source: str = "<scenario>", base_dir: Path | None = None,
                       text: str = "") -> Scenario:
    """Validate an already-parsed scenario dictionary.

    Every table is checked even after a problem is found, so one
    :class:`ScenarioError` lists all of them (``.problems``).
    """
    base_dir = Path(base_dir or Path.cwd())
    top = _Table(raw, "", source, base_dir)
    problems = top.problems
    kwargs: dict[str, Any] = {}

    with problems.guard():
        kwargs["wavelength_nm"] = _wavelengths(top.subtable("wavelengths", required=True))

    kwargs["scattering_angle_deg"] = np.arange(0.0, 181.0, 1.0)
    kwargs["optics_relative_tolerance"] = 1e-4
    with problems.guard():
        opt_t = top.subtable("optics")
        if opt_t is not None:
            if opt_t.has("scattering_angles_deg"):
                angles = opt_t.number_list("scattering_angles_deg", low=0.0, high=180.0)
                if np.any(np.diff(angles) <= 0):
                    raise opt_t.error("scattering_angles_deg", "must be strictly increasing")
                kwargs["scattering_angle_deg"] = angles
            kwargs["optics_relative_tolerance"] = opt_t.number("relative_tolerance", 1e-4, low=1e-10, high=0.1)
            opt_t.finish("scattering_angles_deg, relative_tolerance")

    populations = []
    with problems.guard():
        pops_raw = top.raw("population")
        if not isinstance(pops_raw, list) or not pops_raw or not all(isinstance(p, dict) for p in pops_raw):
            raise top.error("population", "at least one [[population]] table is required")
        for i, p in enumerate(pops_raw):
            with problems.guard():
                populations.append((i, _population(top.child(p, f"population[{i}]"))))
        names = [p.get("name") for p in pops_raw if isinstance(p.get("name"), str)]  # also of bad populations
        if len(set(names)) != len(names):
            raise top.error("population", f"population names must be unique, got {names}")

    # the optional tables: each read on its own, so a problem in one does not hide another's
    readers = {
        "body": _body, "sun": _sun,
        "observer": lambda t: {"observer": _observer(t)}, "view": lambda t: {"view": _view(t)},
        "integration": _integration, "background": _background,
        "instrument": lambda t: {"instrument": _instrument(t)},
        "separation": lambda t: {"separation": _separation(t)},
        "limits": _limits, "sweep": lambda t: {"sweep": _sweep(t, raw)},
    }
    for name, read in readers.items():
        with problems.guard():
            table = top.subtable(name)
            if table is not None:
                kwargs.update(read(table))

    with problems.guard():
        top.finish(", ".join(TOP_LEVEL))

    # checks across tables, on every table that is valid on its own (a bad table is skipped:
    # its own problem is already reported and its defaults would mislead)
    bad = {re.split(r"[.\[]", k, maxsplit=1)[0] for k in problems.keys}
    parts = _Parts(raw=raw, bad=bad, populations=populations, **kwargs)
    for check in (_check_view_against_observer, _check_spectral_coverage, _check_radius_sweep, _check_joint_fit):
        with problems.guard():
            check(parts, top)
    problems.raise_if_any()
    return Scenario(source=source, text=text, raw=raw, base_dir=base_dir,
                    populations=tuple(p for _, p in populations), **kwargs)


class _Parts:
    """The valid tables of a scenario being checked: the values read so far (else the
    :class:`Scenario` defaults), ``bad`` (names of tables with problems) and the valid
    populations with their index in the file."""

    def __init__(self, raw: dict, bad: set, populations: list, **values):
        self.raw, self.bad, self.populations, self.values = raw, bad, populations, values

    def __getattr__(self, name):
        values = self.__dict__.get("values", {})
        if name in values:
            return values[name]
        if name in Scenario.__dataclass_fields__:
            return Scenario.__dataclass_fields__[name].default
        raise AttributeError(name)

    def valid(self, *tables: str) -> bool:
        return not (set(tables) & self.bad)


def _body(t: _Table) -> dict:
    radius = t.number("radius_km", MOON_RADIUS_KM, low=1.0, high=1e5)
    t.finish("radius_km")
    return {"body_radius_km": radius}


def _sun(t: _Table) -> dict:
    distance = t.number("distance_au", 1.0, low=0.05, high=50.0)
    spec = t.string("spectrum", "builtin")
    spectrum = spec if spec == "builtin" else t.path("spectrum")
    t.finish("distance_au, spectrum")
    return {"sun_distance_au": distance, "solar_spectrum": spectrum}


def _integration(t: _Table) -> dict:
    integ = Integration(
        top_altitude_km=t.number("top_altitude_km", 300.0, low=0.0, high=1e5, low_open=True),
        relative_tolerance=t.number("relative_tolerance", 1e-4, low=1e-10, high=0.1),
        extinction=t.boolean("extinction", True),
    )
    t.finish("top_altitude_km, relative_tolerance, extinction")
    return {"integration": integ}


def _background(t: _Table) -> dict:
    bg = Background(
        zodiacal_light=t.boolean("zodiacal_light", True),
        zodiacal_scale=t.number("zodiacal_scale", 1.0, low=0.0, high=100.0),
        dark_surface_radiance_factor=t.number("dark_surface_radiance_factor", 0.0, low=0.0, high=1.0),
    )
    t.finish("zodiacal_light, zodiacal_scale, dark_surface_radiance_factor")
    return {"background": bg}


def _limits(t: _Table) -> dict:
    lim = Limits(
        confidence=t.number("confidence", 0.95, low=0.5, high=0.9999),
        method=t.string("method", "feldman-cousins", choices=("feldman-cousins", "bayesian-flat")),
    )
    t.finish("confidence, method")
    return {"limits": lim}


def _wavelengths(wl_t: _Table) -> np.ndarray:
    if wl_t.has("values_nm"):
        wavelength = wl_t.number_list("values_nm", low=100.0, high=5000.0)
        wl_t.finish("values_nm, or start_nm, stop_nm, step_nm")
    else:
        start = wl_t.number("start_nm", _REQUIRED, low=100.0, high=5000.0)
        stop = wl_t.number("stop_nm", _REQUIRED, low=100.0, high=5000.0)
        step = wl_t.number("step_nm", _REQUIRED, low=0.0, high=1000.0, low_open=True)
        wl_t.finish("values_nm, or start_nm, stop_nm, step_nm")
        if stop < start:
            raise wl_t.error("stop_nm", f"must be >= start_nm ({start:g})")
        n = int(math.floor((stop - start) / step + 1e-9)) + 1
        if n > 100000:
            raise wl_t.error("step_nm", "gives more than 100000 wavelengths")
        wavelength = start + step * np.arange(n)
    if np.any(np.diff(wavelength) <= 0):
        raise wl_t.error("values_nm", "must be strictly increasing")
    return wavelength


def _check_joint_fit(s: "_Parts", top: _Table) -> None:
    if not s.valid("separation") or not s.separation.joint_fit:
        return
    n_pop = len(s.raw.get("population", [])) if isinstance(s.raw.get("population"), list) else 0
    if n_pop > MAX_JOINT_POPULATIONS:
        raise top.error("separation.joint_fit", f"a joint fit takes at most {MAX_JOINT_POPULATIONS} populations "
                                                f"(its non-negative solver enumerates their subsets); got {n_pop}")


def _check_radius_sweep(s: "_Parts", top: _Table) -> None:
    if not s.valid("sweep") or s.sweep is None or not any(k == "radius_um" for k, _ in s.sweep.axes):
        return
    for i, p in s.populations:
        if p.size.kind == "power-law":
            raise top.error("sweep.radius_um",
                            f"population[{i}] ({p.name!r}) has a power-law size distribution, which has no "
                            "single radius to sweep; sweep 'population.NAME.size.max_radius_um' (or "
                            "min_radius_um, slope) instead")


def _check_spectral_coverage(s: "_Parts", top: _Table) -> None:
    """Materials, the solar spectrum and the instrument bins against the model wavelengths
    (each problem recorded, so all are reported together)."""
    if not s.valid("wavelengths"):
        return
    wl = s.wavelength_nm

    def problem(key, message):
        top.problems.add(top.error(key, message))

    for i, p in s.populations:
        lo, hi = p.material.wavelength_range_nm
        if wl[0] < lo or wl[-1] > hi:
            problem(f"population[{i}].material",
                    f"{p.material.name!r} ({p.material.source or 'table'}) covers {lo:g}-{hi:g} nm; "
                    f"the [wavelengths] grid {wl[0]:g}-{wl[-1]:g} nm reaches outside it")
    needs_sun = "observer" in s.raw or "instrument" in s.raw
    if needs_sun and s.valid("sun"):
        from dustrt.sun import solar_table

        try:
            tw, _ = solar_table(s.solar_spectrum)
        except ValueError as exc:
            problem("sun.spectrum", str(exc))
            tw = None
        if tw is not None and (wl[0] < tw[0] or wl[-1] > tw[-1]):
            problem("sun.spectrum", f"the solar spectrum covers {tw[0]:g}-{tw[-1]:g} nm; the "
                                    f"[wavelengths] grid {wl[0]:g}-{wl[-1]:g} nm reaches outside it")
    if s.instrument is not None and s.valid("instrument"):
        inst = s.instrument.instrument
        if wl.size < 2:
            problem("wavelengths", "needs at least two wavelengths when an [instrument] is given")
            return
        # the line-spread function reaches ~1.4 FWHM beyond each bin edge (99.9 % of a Gaussian)
        reach = 0.5 * inst.bin_width_nm + 1.5 * inst.resolution_fwhm_nm
        need_lo = inst.bin_centres_nm[0] - reach
        need_hi = inst.bin_centres_nm[-1] + reach
        if need_lo < wl[0] or need_hi > wl[-1]:
            problem("instrument.wavelength_min_nm" if need_lo < wl[0] else "instrument.wavelength_max_nm",
                    f"the instrument bins and line-spread function need model wavelengths "
                    f"{need_lo:g}-{need_hi:g} nm; [wavelengths] covers {wl[0]:g}-{wl[-1]:g} nm "
                    "(widen [wavelengths] or narrow the instrument range)")


def _population(t: _Table) -> Population:
    """One [[population]]; its material, size and density are each checked even if another is bad."""
    name = None
    with t.problems.guard():  # a bad name does not hide the rest of the population
        name = t.string("name", _REQUIRED)
        if not name or not name.replace("_", "").replace("-", "").isalnum():
            raise t.error("name", f"must be a non-empty name of letters, digits, '-' or '_', got {name!r}")
    if name is None or t.problems.has(f"{t.key}.name"):
        t.bad = True
    parts: dict[str, Any] = {}
    with t.problems.guard():
        parts["material"] = _material(t)
    with t.problems.guard():
        parts["size"] = _size(t.subtable("size", required=True))
    parts["density"] = None
    density_ok = False
    with t.problems.guard():
        dt = t.subtable("density")
        if dt is not None:
            parts["density"] = _density(dt)
        density_ok = True
    if not density_ok:  # a bad density table makes the population bad too
        t.bad = True
    t.finish("name, material, size, density")
    if len(parts) < 3:
        raise _Reported
    return Population(name=name, **parts)


def _material(t: _Table):
    from dustrt import materials

    mat_raw = t.raw("material")
    if mat_raw is None:
        raise t.error("material", "is required: a built-in name, {n, k}, or {table = 'file.csv'}")
    if isinstance(mat_raw, str):
        try:
            return materials.builtin_material(mat_raw)
        except ValueError as exc:
            raise t.error("material", str(exc)) from None
    if not isinstance(mat_raw, dict):
        raise t.error("material", f"must be a built-in name or a table, got {mat_raw!r}")
    mt = t.subtable("material")
    if mt.has("table"):
        p = mt.path("table")
        mt.finish("table (or n, k)")
        try:
            return materials.read_material_csv(p)
        except ValueError as exc:
            raise mt.error("table", str(exc)) from None
    n = mt.number("n", _REQUIRED, low=0.0, high=10.0, low_open=True)
    k = mt.number("k", 0.0, low=0.0, high=10.0)
    mt.finish("n, k (or table)")
    return materials.constant_material(n, k)


_SIZE_KEYS = {
    "monodisperse": ("radius_um",),
    "lognormal": ("median_radius_um", "sigma_g", "min_radius_um", "max_radius_um"),
    "power-law": ("min_radius_um", "max_radius_um", "slope"),
}


def _size(st: _Table):
    from dustrt import sizes

    kind = st.string("distribution", _REQUIRED, choices=tuple(sizes.DISTRIBUTIONS))
    radius = dict(low=1e-4, high=1e3)
    if kind == "monodisperse":
        args = (st.number("radius_um", _REQUIRED, **radius),)
    elif kind == "lognormal":
        args = (st.number("median_radius_um", _REQUIRED, **radius),
                st.number("sigma_g", _REQUIRED, low=1.0, high=10.0, low_open=True),
                st.number("min_radius_um", None, **radius),
                st.number("max_radius_um", None, **radius))
    else:
        args = (st.number("min_radius_um", _REQUIRED, **radius),
                st.number("max_radius_um", _REQUIRED, **radius),
                st.number("slope", _REQUIRED, low=-10.0, high=10.0))
    st.finish("distribution, " + ", ".join(_SIZE_KEYS[kind]))
    try:
        return sizes.DISTRIBUTIONS[kind](*args)
    except ValueError as exc:
        raise st.error(None, str(exc)) from None


#: Highest polynomial order of the free zodiacal colour terms (more would absorb any dust colour).
MAX_COLOUR_ORDER = 3

#: Populations a joint fit may hold (dustrt.lsq enumerates subsets of the constrained amplitudes).
MAX_JOINT_POPULATIONS = 8

#: Adjacent-node density ratio above which a table's linear interpolation is flagged (25 % at mid-layer).
COARSE_TABLE_RATIO = 4.0

_PROFILE_KEYS = {
    "exponential": (("surface_density_cm3", True), ("scale_height_km", True)),
    "power-law": (("surface_density_cm3", True), ("reference_altitude_km", True), ("exponent", True)),
    "terminator": (("surface_density_cm3", True), ("scale_height_km", True), ("sunlit_width_km", True),
                   ("dark_width_km", True), ("offset_km", False), ("floor_fraction", False)),
}


def _density(t: _Table):
    from dustrt import density

    kind = t.string("profile", _REQUIRED, choices=tuple(_PROFILE_KEYS) + ("table",))
    try:
        if kind == "table":
            p = t.path("file")
            scale = t.number("scale", 1.0, low=0.0, high=1e30)
            t.finish("profile, file, scale")
            table = density.TableProfile.from_file(p, scale=scale)
            ratio, h0, h1 = table.steepest_altitude_step()
            if ratio > COARSE_TABLE_RATIO:
                from dustrt import warn

                warn(f"{p}: the density changes by a factor {ratio:.3g} between the altitude nodes {h0:g} and "
                     f"{h1:g} km; the table is interpolated linearly in density, which over-weights that layer "
                     f"(by {100 * (math.cosh(math.log(ratio) / 2) - 1):.0f} % at its middle for an exponential "
                     "fall); add altitude nodes")
            return table
        params = {}
        for key, required in _PROFILE_KEYS[kind]:
            v = t.number(key, _REQUIRED if required else None, low=-1e30, high=1e30)
            if v is not None:
                params[key] = v
        t.finish("profile, " + ", ".join(k for k, _ in _PROFILE_KEYS[kind]))
        return density.make_profile(kind.replace("-", "_"), **params)
    except ScenarioError:
        raise
    except ValueError as exc:
        raise t.error(None, str(exc)) from None


def _observer(t: _Table) -> Observer:
    from dustrt.geometry import local_time_from_solar_zenith_h

    alt = t.number("altitude_km", _REQUIRED, low=0.0, high=1e5, low_open=True)
    lat = t.number("latitude_deg", 0.0, low=-90.0, high=90.0)
    if t.has("local_time_h") and t.has("solar_zenith_deg"):
        raise t.error("local_time_h", "give either local_time_h or solar_zenith_deg with side, not both")
    if t.has("solar_zenith_deg"):
        sza = t.number("solar_zenith_deg", _REQUIRED, low=0.0, high=180.0)
        side = t.string("side", _REQUIRED, choices=("dawn", "dusk"))
        try:
            lt = local_time_from_solar_zenith_h(sza, side, lat)
        except ValueError as exc:
            raise t.error("solar_zenith_deg", str(exc)) from None
    else:
        lt = t.number("local_time_h", _REQUIRED, low=0.0, high=24.0, high_open=True)
    t.finish("altitude_km, latitude_deg, local_time_h (or solar_zenith_deg and side)")
    return Observer(altitude_km=alt, latitude_deg=lat, local_time_h=lt)


def _view(t: _Table) -> View:
    az = t.number("azimuth_deg", 0.0, low=-360.0, high=360.0)
    if t.has("directions"):
        if t.has("tangent_altitudes_km"):
            raise t.error("directions", "give either directions or tangent_altitudes_km, not both")
        raw = t.raw("directions")
        try:
            d = np.asarray(raw, dtype=float)
        except (TypeError, ValueError):
            d = np.zeros((0,))
        if d.ndim != 2 or d.shape[1] != 3 or d.shape[0] < 1 or not np.all(np.isfinite(d)):
            raise t.error("directions", "must be a list of [lx, ly, lz] look vectors")
        norm = np.linalg.norm(d, axis=1)
        if np.any(norm == 0):
            raise t.error("directions", "look vectors must be non-zero")
        t.finish("directions, azimuth_deg")
        return View(tangent_altitudes_km=None, azimuth_deg=az, directions=d / norm[:, None])
    if not t.has("tangent_altitudes_km"):
        raise t.error("tangent_altitudes_km", "is required (or directions)")
    h = _grid(t, "tangent_altitudes_km", low=-100.0, high=1e5)
    t.finish("tangent_altitudes_km, azimuth_deg (or directions)")
    return View(tangent_altitudes_km=h, azimuth_deg=az, directions=None)


def _check_view_against_observer(s: "_Parts", top: _Table) -> None:
    if not s.valid("observer", "view", "body"):
        return
    if s.view is None or s.observer is None or s.view.tangent_altitudes_km is None:
        return
    h = s.view.tangent_altitudes_km
    from dustrt.geometry import limb_look_directions, observer_position_km

    obs = s.observer
    try:  # the limb construction needs a sunward horizontal direction at the observer
        position = observer_position_km(s.body_radius_km, obs.altitude_km, obs.latitude_deg, obs.local_time_h)
        limb_look_directions(position, s.body_radius_km, h[h < obs.altitude_km][:1], s.view.azimuth_deg)
    except ValueError as exc:
        key = "solar_zenith_deg" if "solar_zenith_deg" in s.raw.get("observer", {}) else "local_time_h"
        raise top.error(f"observer.{key}", str(exc)) from None
    if np.any(h >= s.observer.altitude_km):
        raise top.error("view.tangent_altitudes_km",
                        f"must be below the observer altitude ({s.observer.altitude_km:g} km), got {h.max():g}")
    if np.any(h < -s.body_radius_km):
        raise top.error("view.tangent_altitudes_km", "must be above -radius_km")


def _instrument(t: _Table):
    from dustrt import instrument as inst_mod

    kw: dict[str, Any] = {}
    kw["aperture_area_cm2"] = t.number("aperture_area_cm2", _REQUIRED, low=0.0, high=1e6, low_open=True)
    if t.has("field_of_view_deg") == t.has("solid_angle_sr"):
        t.used.update(("field_of_view_deg", "solid_angle_sr"))
        t.report("field_of_view_deg", "give exactly one of field_of_view_deg (full cone angle) and solid_angle_sr")
    elif t.has("field_of_view_deg"):
        kw["field_of_view_deg"] = t.number("field_of_view_deg", _REQUIRED, low=0.0, high=180.0, low_open=True)
    else:
        kw["solid_angle_sr"] = t.number("solid_angle_sr", _REQUIRED, low=0.0, high=2 * math.pi, low_open=True)
    kw["integration_time_s"] = t.number("integration_time_s", _REQUIRED, low=0.0, high=1e7, low_open=True)
    kw["frames"] = t.number("frames", 1, low=1, high=1e7, integer=True)
    kw["bin_width_nm"] = t.number("bin_width_nm", _REQUIRED, low=0.0, high=1000.0, low_open=True)
    kw["resolution_fwhm_nm"] = t.number("resolution_fwhm_nm", _REQUIRED, low=0.0, high=1000.0)
    kw["wavelength_min_nm"] = t.number("wavelength_min_nm", _REQUIRED, low=100.0, high=5000.0)
    kw["wavelength_max_nm"] = t.number("wavelength_max_nm", _REQUIRED, low=100.0, high=5000.0)
    thr = t.raw("throughput", 1.0)
    if isinstance(thr, str):
        with t.problems.guard():  # a bad throughput file does not hide the other keys
            try:
                kw["throughput"] = inst_mod.read_throughput_csv(t.path("throughput"))
            except ValueError as exc:
                raise t.error("throughput", str(exc)) from None
        if "throughput" not in kw:
            t.bad = True
    else:
        kw["throughput"] = t.number("throughput", 1.0, low=0.0, high=1.0, low_open=True)
    kw["read_noise_e"] = t.number("read_noise_e", 0.0, low=0.0, high=1e6)
    kw["dark_current_e_s"] = t.number("dark_current_e_s", 0.0, low=0.0, high=1e9)
    kw["stray_light_fraction"] = t.number("stray_light_fraction", 0.0, low=0.0, high=1.0)
    kw["stray_light_reference_radiance"] = t.number("stray_light_reference_radiance_w_m2_sr_nm", 0.0,
                                                     low=0.0, high=1e3)
    kw["calibration_error_fraction"] = t.number("calibration_error_fraction", 0.0, low=0.0, high=0.5)
    fov_nodes = t.number("field_of_view_rings", 0, low=0, high=64, integer=True)
    t.finish("aperture_area_cm2, field_of_view_deg | solid_angle_sr, integration_time_s, frames, "
             "bin_width_nm, resolution_fwhm_nm, wavelength_min_nm, wavelength_max_nm, throughput, "
             "read_noise_e, dark_current_e_s, stray_light_fraction, stray_light_reference_radiance_w_m2_sr_nm, "
             "calibration_error_fraction, field_of_view_rings")
    try:
        instrument = inst_mod.Instrument(**kw)
    except ValueError as exc:
        raise t.error(None, str(exc)) from None
    return InstrumentConfig(instrument=instrument, field_of_view_rings=fov_nodes)


@dataclass(frozen=True)
class InstrumentConfig:
    """The instrument plus how the field of view is sampled (0 rings: central ray only)."""

    instrument: Any
    field_of_view_rings: int = 0


def _band(t: _Table, name: str, default):
    if not t.has(name):
        return default
    arr = t.number_list(name, low=100.0, high=5000.0, min_len=2)
    if arr.size != 2 or arr[1] <= arr[0]:
        t.report(name, f"must be [lower_nm, upper_nm] with lower < upper, got {arr.tolist()}")
        return default
    return (float(arr[0]), float(arr[1]))


def _band_list(t: _Table, name: str) -> tuple:
    if not t.has(name):
        return ()
    v = t.raw(name)
    if not isinstance(v, list) or not all(isinstance(b, list) for b in v):
        t.report(name, "must be a list of [lower_nm, upper_nm] pairs")
        return ()
    out = []
    for i, b in enumerate(v):
        if len(b) != 2 or any(isinstance(x, bool) or not isinstance(x, (int, float)) for x in b) \
                or not (100 <= b[0] < b[1] <= 5000):
            t.report(f"{name}[{i}]", f"must be [lower_nm, upper_nm] with 100 <= lower < upper <= 5000, got {b!r}")
            continue
        out.append((float(b[0]), float(b[1])))
    return tuple(out)


def _separation(t: _Table) -> Separation:
    s = Separation(
        blue_band_nm=_band(t, "blue_band_nm", Separation.blue_band_nm),
        red_band_nm=_band(t, "red_band_nm", Separation.red_band_nm),
        fit_bands_nm=_band_list(t, "fit_bands_nm"),
        mask_nm=_band_list(t, "mask_nm"),
        free_colour_slope=t.boolean("free_colour_slope", False),
        joint_fit=t.boolean("joint_fit", False),
        zodiacal_colour_order=t.number("zodiacal_colour_order", 0, low=0, high=MAX_COLOUR_ORDER, integer=True),
    )
    t.finish("blue_band_nm, red_band_nm, fit_bands_nm, mask_nm, free_colour_slope, zodiacal_colour_order, "
             "joint_fit")
    return s


def _sweep(t: _Table, raw: dict) -> Sweep:
    axes = []
    sigma = t.number("detection_sigma", 5.0, low=0.0, high=100.0, low_open=True)
    chunk = t.number("chunk_size", 0, low=0, high=1e6, integer=True)
    swept = [k for k in t.data if k not in ("detection_sigma", "chunk_size")]
    for key in swept:
        with t.problems.guard():  # every swept key is checked, even after a bad one
            try:
                t.bad, bad_before = False, t.bad
                if key != "radius_um":
                    try:
                        if key.startswith("sweep."):
                            raise KeyError("the [sweep] table's own keys are not swept")
                        locate_key(raw, key)
                    except KeyError as exc:
                        t.used.add(key)
                        raise t.error(key, f"is not a numeric key of this scenario ({exc.args[0]}); use a dotted "
                                           "path such as 'observer.local_time_h' or "
                                           "'population.NAME.density.scale_height_km'") from None
                limits = dict(low=1e-4, high=1e3) if key == "radius_um" else dict(low=-1e30, high=1e30)
                values = _grid(t, key, **limits)
                if not t.bad:
                    axes.append((key, np.asarray(values, dtype=float)))
            finally:
                t.bad = t.bad or bad_before
    if not swept:
        raise t.error(None, "needs at least one swept key (e.g. radius_um = {start, stop, num, spacing})")
    t.finish()
    return Sweep(axes=tuple(axes), detection_sigma=sigma, chunk_size=chunk)


# ---------------------------------------------------------------- dotted keys (sweeps)


def _locate(raw: dict, dotted: str):
    parts = dotted.split(".")
    node: Any = raw
    i = 0
    while i < len(parts) - 1:
        part = parts[i]
        if part == "population":
            if i + 1 >= len(parts) - 1:
                raise KeyError(f"'{dotted}' needs population.NAME.key")
            name = parts[i + 1]
            pops = node.get("population", []) if isinstance(node, dict) else []
            match = [p for p in pops if isinstance(p, dict) and p.get("name") == name]
            if not match:
                raise KeyError(f"no population named {name!r}")
            node = match[0]
            i += 2
            continue
        if not isinstance(node, dict) or part not in node or not isinstance(node[part], dict):
            raise KeyError(f"no table {part!r}")
        node = node[part]
        i += 1
    last = parts[-1]
    if not isinstance(node, dict):
        raise KeyError(f"no key {last!r}")
    return node, last


def locate_key(raw: dict, dotted: str) -> None:
    """KeyError unless ``dotted`` names a key of the scenario, or an optional key its table may hold.

    The value's type is left to the table's own reader (a bad base value is reported there once)."""
    node, last = _locate(raw, dotted)
    if last not in node and last not in _KNOWN_KEYS:
        raise KeyError(f"no key {last!r} (misspelt?)")


def with_values(raw: dict, values: dict[str, float]) -> dict:
    """A deep copy of ``raw`` with dotted keys set (radius_um is handled by the caller)."""
    out = copy.deepcopy(raw)
    for key, value in values.items():
        node, last = _locate(out, key)
        node[last] = int(value) if isinstance(node.get(last), int) and float(value).is_integer() \
            and not isinstance(node.get(last), bool) else float(value)
    return out
