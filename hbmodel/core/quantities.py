"""Names, units and axis labels of the quantities hbmodel reports (one table for figures and reports)."""
from __future__ import annotations

__all__ = ["QUANTITIES", "unit_of", "text_label", "axis_label", "in_unit"]

#: key -> (plain-text name, unit or "" for dimensionless, TeX axis symbol)
QUANTITIES = {
    "mass_loss": ("mean RGB mass loss ΔM", "Msun", r"$\Delta M$"),
    "mass_loss_sd": ("mass-loss spread σ(ΔM)", "Msun", r"$\sigma_{\Delta M}$"),
    "hb_mass_mean": ("mean HB mass", "Msun", r"$\langle M_\mathrm{HB}\rangle$"),
    "eta": ("Reimers η", "", r"$\eta$"),
    "distance_modulus": ("distance modulus (m − M)0", "mag", r"$(m-M)_0$"),
    "distance_kpc": ("distance", "kpc", r"$d$"),
    "ebv": ("E(B − V)", "mag", r"$E(B-V)$"),
    "ebv_err": ("error of E(B − V)", "mag", r"$\sigma_{E(B-V)}$"),
    "ebv_spread": ("differential reddening σ(E(B − V)) star to star", "mag", r"$\delta E(B-V)$"),
    "helium_fraction": ("helium-enriched fraction", "", r"$f_\mathrm{He}$"),
    "delta_y": ("helium enrichment ΔY", "", r"$\Delta Y$"),
    "age": ("age", "Gyr", "age"),
    "field_fraction": ("field fraction", "", r"$f_\mathrm{field}$"),
    "colour_offset": ("colour zero point", "mag", r"$\delta_c$"),
    "mag_offset": ("magnitude zero point", "mag", r"$\delta_m$"),
    "rgb_mass_sd": ("RGB mass scatter", "Msun", r"$\sigma_{M,\mathrm{RGB}}$"),
    "clump_peak_mag": ("observed clump peak", "mag", "clump peak"),
    "clump_absmag": ("model clump absolute magnitude", "mag", r"$M_\mathrm{RC}$"),
    "population_correction": ("population correction", "mag", r"$\Delta M_\mathrm{pop}$"),
    "extinction_mag": ("extinction", "mag", "A"),
    "n_stars": ("stars in the fit", "", "stars in the fit"),
    "hb_type": ("HB type (B − R)/(B + V + R)", "", "HB type"),
    "fit_time_s": ("fit time", "s", "fit time"),
}

_TEX_UNITS = {"Msun": r"$M_\odot$", "mag": "mag", "kpc": "kpc", "Gyr": "Gyr", "s": "s"}


def _base(key: str) -> str:
    for suffix in ("_median", "_lo", "_hi"):
        if key.endswith(suffix) and key[: -len(suffix)] in QUANTITIES:
            return key[: -len(suffix)]
    return key


def unit_of(key: str) -> str:
    """Unit of a reported quantity ("" if dimensionless or unknown)."""
    q = QUANTITIES.get(_base(key))
    return q[1] if q else ""


def text_label(key: str) -> str:
    q = QUANTITIES.get(_base(key))
    return q[0] if q else key.replace("_", " ")


def axis_label(key: str) -> str:
    """Axis label with the unit in brackets, e.g. ``$\\Delta M$ [$M_\\odot$]``; unknown keys keep their name."""
    q = QUANTITIES.get(_base(key))
    if q is None:
        return key.replace("_", " ")
    return f"{q[2]} [{_TEX_UNITS.get(q[1], q[1])}]" if q[1] else q[2]


def in_unit(value, unit: str, name: str) -> float:
    """``value`` as a plain float in ``unit`` (astropy unit string, e.g. "Gyr", "mag"): an astropy
    ``Quantity`` is converted (``12 * u.Gyr``, ``12000 * u.Myr``), a plain number is taken to be in ``unit``
    already (the ``_gyr``/``_mag`` names say which).  One-line ValueError for an incompatible unit or a
    non-scalar.  The API edge of hbmodel: inside, every quantity is a float in the unit its name states."""
    if hasattr(value, "unit") and hasattr(value, "to_value"):
        try:
            out = value.to_value(unit)
        except Exception:
            raise ValueError(f"{name} must be in units convertible to {unit} (got {value.unit})") from None
    else:
        out = value
    try:
        return float(out)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number (in {unit}), got {value!r}") from None
