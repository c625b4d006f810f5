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
    ax1.legend(fontsize=7)
    for i in _pick(order, 4):
        k = order[i]
        ax2.semilogy(wl, ds["radiance"].values[k], label=f"h_t = {h[k]:.1f} km")
    ax2.set_xlabel("wavelength [nm]")
    ax2.set_ylabel("spectral radiance [W m⁻² sr⁻¹ nm⁻¹]")
    ax2.legend(fontsize=7)
    fig.suptitle("limb radiance of the hypothesised dust")
    return fig
