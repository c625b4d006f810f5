"""matplotlib figures.  Each ``*_axes`` function draws on given axes (or new ones)
and returns what it drew; each ``*_figure`` function makes a quick-look figure."""

from __future__ import annotations

import numpy as np


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def _pick(values, n):
    idx = np.unique(np.linspace(0, len(values) - 1, min(n, len(values))).round().astype(int))
    return idx


def optics_figure(ds):
    """Cross sections vs wavelength and phase functions at a few wavelengths."""
    plt = _plt()
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(11, 4.2))
    wl = ds["wavelength_nm"].values
    for p in ds["population"].values:
        sel = ds.sel(population=p)
        (line,) = ax1.loglog(wl, sel["scattering_cross_section"], label=f"{p}: scattering")
        ax1.loglog(wl, sel["extinction_cross_section"], ls="--", color=line.get_color(), label=f"{p}: extinction")
        for j in _pick(wl, 3):
            ax2.semilogy(ds["scattering_angle_deg"], sel["phase_function"][j], color=line.get_color(),
                         alpha=0.4 + 0.6 * j / max(1, len(wl) - 1), label=f"{p} {wl[j]:.0f} nm")
    ax1.set_xlabel("wavelength [nm]")
    ax1.set_ylabel("cross section per grain [µm²]")
    ax1.legend(fontsize=7)
    ax2.set_xlabel("scattering angle [deg]")
    ax2.set_ylabel("phase function [1, ∫P dΩ = 4π]")
    ax2.legend(fontsize=7)
    fig.suptitle("grain-population optics")
    return fig


def limb_figure(ds):
    """Limb profiles (radiance vs tangent altitude, log) and spectra at a few tangent altitudes."""
    plt = _plt()
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(11, 4.2))
    wl = ds["wavelength_nm"].values
    h = ds["tangent_altitude_km"].values
    order = np.argsort(h)
    for j in _pick(wl, 4):
        ax1.semilogx(ds["radiance"].values[order, j], h[order], marker="o", ms=3, label=f"dust {wl[j]:.0f} nm")
    if "zodiacal_radiance" in ds:
        j = _pick(wl, 4)[len(_pick(wl, 4)) // 2]
        ax1.semilogx(ds["zodiacal_radiance"].values[order, j], h[order], ls=":", color="grey",
                     label=f"zodiacal light {wl[j]:.0f} nm")
    ax1.set_xlabel("spectral radiance [W m⁻² sr⁻¹ nm⁻¹]")
    ax1.set_ylabel("tangent altitude [km]")
    ax1.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.14), ncol=3)  # below: never on a curve
    for i in _pick(order, 4):
        k = order[i]
        ax2.semilogy(wl, ds["radiance"].values[k], label=f"h_t = {h[k]:.1f} km")
    ax2.set_xlabel("wavelength [nm]")
    ax2.set_ylabel("spectral radiance [W m⁻² sr⁻¹ nm⁻¹]")
    ax2.legend(fontsize=7)
    fig.suptitle("limb radiance of the hypothesised dust")
    return fig


def limits_figure(ds):
    """Upper limit vs grain radius (log-log) with the detection threshold; detections as intervals."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6.5, 4.5))
    for i, p in enumerate(ds["population"].values):
        color = f"C{i}"
        sel = ds.sel(population=p)
        r = sel["radius_um"].values
        up = sel["density_upper_limit_cm3"].values
        lo = sel["density_lower_limit_cm3"].values
        two = sel["two_sided"].values.astype(bool)
        if (~two).any():
            ax.plot(r[~two], up[~two], marker="v", ms=5, color=color,
                    label=f"{p}: upper limit ({ds.attrs['confidence']:g} CL)")
        ax.plot(r, sel["detection_threshold_density_cm3"], ls="--", marker=".", color=color,
                label=f"{p}: {ds.attrs['detection_sigma']:g}σ detection threshold")
        if "hypothesis_density_cm3" in sel:
            ax.axhline(float(sel["hypothesis_density_cm3"]), ls=":", color=color, lw=1,
                       label=f"{p}: hypothesised density")
        if "fit_reliable" in sel and not np.all(sel["fit_reliable"].values):
            bad = ~sel["fit_reliable"].values.astype(bool)
            ax.plot(r[bad], up[bad], ls="none", marker="x", ms=9, color="red",
                    label=f"{p}: model does not fit the data (unreliable)")
        if two.any():
            mid = np.sqrt(lo[two] * up[two])
            ax.errorbar(r[two], mid, yerr=[mid - lo[two], up[two] - mid], fmt="o", ms=4, capsize=3,
                        color=color, label=f"{p}: detection, {ds.attrs['confidence']:g} CL interval")
    ax.set_xscale("log")
    ax.set_yscale("log")
    r_all = ds["radius_um"].values
    if np.unique(r_all).size == 1:
        ax.set_xlim(r_all.min() / 2, r_all.max() * 2)
    ax.set_xlabel("grain radius [µm]")
    ax.set_ylabel("density normalisation [cm⁻³]")
    ax.set_title(f"density limits ({ds.attrs['method']})", fontsize=10)
    ax.legend(fontsize=7)
    return fig


def separation_figure(ds, population=0, observation=0):
    """Data, fitted zodiacal and dust components, and residuals for a few lines of sight.

    A joint fit shows every population's dust and the residual against their sum (``population``
    is then not used); otherwise the one hypothesis ``population``.
    """
    plt = _plt()
    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(10, 6), sharex=True, gridspec_kw={"height_ratios": [3, 1]})
    wl = ds["wavelength_nm"].values
    joint = bool(ds.attrs.get("joint_fit", 0))
    pops = list(range(ds.sizes["population"])) if joint else [population]
    data = ds.isel(observation=observation)
    for k in _pick(ds["line_of_sight"].values, 3):
        s = data.isel(line_of_sight=k)
        view = (f"tangent altitude {float(s['tangent_altitude_km']):.1f} km" if "tangent_altitude_km" in s.coords
                else f"line of sight {k}")
        (line,) = ax1.semilogy(wl, s["observed_radiance"], lw=2.5, alpha=0.35, label=f"data, {view}")
        color = line.get_color()
        zod = s["zodiacal_fit_radiance"].isel(population=pops[0])  # one zodiacal fit (shared when joint)
        ax1.semilogy(wl, zod, ls=":", lw=1.2, color=color, label="zodiacal fit")
        styles = ("--", "-.", (0, (1, 1)), (0, (5, 1, 1, 1)))
        for j, q in enumerate(pops):
            dust = s["dust_excess_radiance"].isel(population=q)
            name = ds["population"].values[q]
            ax1.semilogy(wl, dust, ls=styles[j % len(styles)], color=color, lw=1.0 + 0.5 * (j // len(styles)),
                         label=f"dust fit {name}" + ("" if np.any(dust.values > 0) else " (zero: not drawn)"))
        model = zod + s["dust_excess_radiance"].isel(population=pops).sum("population")
        ax2.plot(wl, (s["observed_radiance"] - model) / s["observed_uncertainty"], lw=0.8, color=color)
    ax1.set_ylabel("spectral radiance [W m⁻² sr⁻¹ nm⁻¹]")
    ax1.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))  # beside: never on the spectra
    ax2.set_xlabel("wavelength [nm]")
    ax2.set_ylabel("residual [σ]")
    what = ("joint fit of " + ", ".join(str(v) for v in ds["population"].values) if joint
            else f"population {ds['population'].values[population]}")
    fig.suptitle(f"dust/zodiacal separation: {what} (observation {observation})")
    return fig


def _is_geometric(values) -> bool:
    values = np.asarray(values, dtype=float)
    return values.size > 1 and bool(np.all(values > 0)) and values.max() / values.min() >= 10


def _cell_edges(values, log: bool):
    """Cell edges around grid values: midpoints (in log space for log axes), mirrored at the ends."""
    v = np.log(values) if log else np.asarray(values, dtype=float)
    if v.size == 1:
        e = np.array([v[0] - 0.5, v[0] + 0.5])
    else:
        mid = 0.5 * (v[1:] + v[:-1])
        e = np.concatenate([[v[0] - (mid[0] - v[0])], mid, [v[-1] + (v[-1] - mid[-1])]])
    return np.exp(e) if log else e


def _axis_label(coord, dim) -> str:
    """'grain radius [µm]' for the radius axis; other swept keys by their dotted path and units."""
    key = coord.attrs.get("sweep_key", dim)
    if key == "radius_um":
        return "grain radius (monodisperse radius or lognormal median) [µm]"
    units = coord.attrs.get("units", "")
    return f"{key} [{units}]" if units and units != "1" else key


def sweep_figure(ds):
    """Minimum detectable density vs grain radius (log-log), or a 2-D map for two swept keys."""
    plt = _plt()
    dims = [d for d in ds["minimum_detectable_density_cm3"].dims if d != "population"]
    var = ds["minimum_detectable_density_cm3"]
    if len(dims) == 2:
        fig, axes = plt.subplots(1, ds.sizes["population"], figsize=(6 * ds.sizes["population"], 4.5), squeeze=False)
        for ax, p in zip(axes[0], ds["population"].values):
            z = var.sel(population=p).transpose(dims[1], dims[0])
            xv, yv = ds[dims[0]].values, ds[dims[1]].values
            xlog, ylog = _is_geometric(xv), _is_geometric(yv)
            mesh = ax.pcolormesh(_cell_edges(xv, xlog), _cell_edges(yv, ylog), np.log10(z.values), shading="flat")
            if xlog:
                ax.set_xscale("log")  # geometric grids read better on a log axis
            if ylog:
                ax.set_yscale("log")
            fig.colorbar(mesh, ax=ax, label="log10 minimum detectable density [cm⁻³]")
            ax.set_xlabel(_axis_label(ds[dims[0]], dims[0]))
            ax.set_ylabel(_axis_label(ds[dims[1]], dims[1]))
            ax.set_title(f"population {p}", fontsize=10)
        return fig
    fig, (ax, axv) = plt.subplots(1, 2, figsize=(11, 4.5))
    x = dims[0]
    rest = [d for d in dims[1:]]
    for p in ds["population"].values:
        v = var.sel(population=p)
        vol = ds["minimum_detectable_volume_density_um3_cm3"].sel(population=p)
        if rest:
            v, vol = v.isel({d: 0 for d in rest}), vol.isel({d: 0 for d in rest})
        line, = ax.loglog(ds[x], v, marker="o", ms=3, label=f"{p}")
        axv.loglog(ds[x], vol, marker="o", ms=3, color=line.get_color(), label=f"{p}")
        if np.any(np.isfinite(vol.values)):
            k = int(np.nanargmin(vol.values))  # the most detectable dust mass loading
            axv.plot(ds[x].values[k], vol.values[k], "*", ms=11, color=line.get_color())
    for a in (ax, axv):
        a.set_xlabel(_axis_label(ds[x], x))
        a.legend(fontsize=7)
    ax.set_ylabel("minimum detectable density [cm⁻³]")
    axv.set_ylabel("minimum detectable grain volume [µm³ cm⁻³]")
    ax.set_title(f"{ds.attrs['detection_sigma']:g}σ detectability: number density", fontsize=10)
    axv.set_title("grain volume density (★ most detectable)", fontsize=10)
    fig.tight_layout()
    return fig
