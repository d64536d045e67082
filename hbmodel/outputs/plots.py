"""Figures the commands write (object-oriented matplotlib, Agg canvas; nothing is displayed).

Every function returns ``(figure, axes)`` and follows :mod:`hbmodel.io.figures`: labelled axes with
units, magnitudes bright side up, a colour-blind-safe palette, legends off the data, sizes for a
journal column or a full page.
"""
from __future__ import annotations

import numpy as np

from hbmodel.io.figures import (DIVERGING_CMAP, FEH_LABEL, HB_MASS_LABEL, OKABE_ITO, colour_label, format_feh,
                         invert_mag_axis, mag_label, new_figure, place_legend, styled)
from hbmodel.core.quantities import axis_label

__all__ = ["PHASE_STYLE", "plot_cmd", "plot_luminosity_function", "plot_hb_type_grid", "plot_clump_grid",
           "plot_clump_lf", "plot_fit_cmd", "plot_fit_hess", "plot_corner", "plot_hb_mass",
           "plot_posterior_predictive", "hb_phase_label"]

#: Colours (Okabe & Ito) and labels of the evolutionary phases in CMD plots.
PHASE_STYLE = {
    "rgb": dict(color=OKABE_ITO["vermillion"], label="RGB"),
    "hb": dict(color=OKABE_ITO["blue"], label="HB"),
    "agb": dict(color=OKABE_ITO["bluish_green"], label="early AGB"),
    "field": dict(color="#8c8c8c", label="field"),
}
#: Core-helium burners cooler than this are called the red clump (no blue HB / RR Lyrae).
_CLUMP_TEFF_K = 5600.0


def hb_phase_label(table) -> str:
    """"red clump" when every core-helium-burning star is cooler than 5600 K (a clump population),
    "HB" when some are hotter (a horizontal branch), "HB / clump" when the catalogue has no Teff."""
    col = next((c for c in ("teff_k", "teff") if c in table.colnames), None)  # a mock's, or a user's column
    if col is None or "phase" not in table.colnames:
        return "HB / clump"
    hb = np.asarray(table["phase"]).astype(str) == "hb"
    if not hb.any():
        return "HB"
    teff = np.asarray(table[col], float)[hb]
    return "red clump" if np.all(teff[np.isfinite(teff)] < _CLUMP_TEFF_K) else "HB"


@styled
def plot_cmd(table, mag_band: str, colour: tuple, ax=None, title=None, *, width="column"):
    """CMD of a catalogue: stars by ``phase`` (one colour, "catalogue", without that column),
    RR Lyrae ringed, magnitudes bright side up, the legend where no stars are (or outside)."""
    if colour[0] == colour[1]:
        raise ValueError(f"a colour-magnitude diagram needs two bands (got {colour[0]} − {colour[1]}); "
                         "use plot_luminosity_function for one band")
    fig, ax = (new_figure(width, 1.25) if ax is None else (ax.figure, ax))
    c = np.asarray(table[colour[0]], float) - np.asarray(table[colour[1]], float)
    m = np.asarray(table[mag_band], float)
    if "phase" in table.colnames:
        phase = np.asarray(table["phase"]).astype(str)
        hb_label = hb_phase_label(table)
        for ph, style in PHASE_STYLE.items():
            sel = phase == ph
            if sel.any():
                style = dict(style, label=hb_label) if ph == "hb" else style
                ax.scatter(c[sel], m[sel], s=3, lw=0, alpha=0.75, rasterized=True, **style)
    else:
        ax.scatter(c, m, s=3, lw=0, alpha=0.75, color=OKABE_ITO["black"], rasterized=True,
                   label=f"catalogue (N = {len(m)})")
    if "is_rr" in table.colnames:
        rr = np.asarray(table["is_rr"], bool)
        if rr.any():
            ax.scatter(c[rr], m[rr], s=14, facecolors="none", edgecolors=OKABE_ITO["reddish_purple"], lw=0.7,
                       label="RR Lyrae", rasterized=True)
    ax.set_xlabel(colour_label(*colour))
    ax.set_ylabel(mag_label(mag_band))
    invert_mag_axis(ax)
    if title:
        ax.set_title(title)
    place_legend(ax, c, m, markerscale=2.5)
    return fig, ax


@styled
def plot_luminosity_function(table, band: str, ax=None, title=None, *, bin_mag=0.1, width="column"):
    """Luminosity function of a one-band catalogue, stacked by phase (when a ``phase`` column exists)."""
    fig, ax = (new_figure(width, 0.75) if ax is None else (ax.figure, ax))
    m = np.asarray(table[band], float)
    m = m[np.isfinite(m)] if "phase" not in table.colnames else m
    ok = np.isfinite(m)
    if not ok.any():
        raise ValueError(f"no finite {band} magnitudes to plot")
    lo, hi = np.floor(m[ok].min() / bin_mag) * bin_mag, np.ceil(m[ok].max() / bin_mag) * bin_mag + bin_mag
    edges = np.arange(lo, hi + 0.5 * bin_mag, bin_mag)
    if "phase" in table.colnames:
        phase = np.asarray(table["phase"]).astype(str)
        groups = [(m[ok & (phase == ph)], dict(st, label=hb_phase_label(table) if ph == "hb" else st["label"]))
                  for ph, st in PHASE_STYLE.items() if np.any(ok & (phase == ph))]
        ax.hist([g[0] for g in groups], bins=edges, stacked=True, histtype="stepfilled", alpha=0.8,
                color=[g[1]["color"] for g in groups], label=[g[1]["label"] for g in groups])
    else:
        ax.hist(m[ok], bins=edges, histtype="step", color=OKABE_ITO["black"], label=f"catalogue (N = {ok.sum()})")
    ax.set_yscale("log")
    ax.set_xlabel(mag_label(band))
    ax.set_ylabel(f"stars per {bin_mag:g} mag")
    invert_mag_axis(ax, "x")
    if title:
        ax.set_title(title)
    place_legend(ax)
    return fig, ax


@styled
def plot_hb_type_grid(table, ax=None, *, width="column"):
    """HB type versus [Fe/H], one line per value of the series parameter."""
    fig, ax = (new_figure(width, 0.85) if ax is None else (ax.figure, ax))
    series = str(table["series"][0])
    hb = np.asarray(table["hb_type"], float)
    feh = np.asarray(table["feh"], float)
    for v in np.unique(np.asarray(table["series_value"])):
        sel = np.asarray(table["series_value"]) == v
        label = f"age = {v:g} Gyr" if series == "age" else f"η = {v:g}"
        ax.plot(hb[sel], feh[sel], marker="o", ms=3, label=label)
    ax.set_xlabel("HB type (B − R)/(B + V + R)")
    ax.set_ylabel(FEH_LABEL)
    ax.set_xlim(-1.05, 1.05)
    place_legend(ax, hb, feh)
    return fig, ax


@styled
def plot_clump_grid(table, band, ax=None, *, eta=None, width="column"):
    """Clump absolute magnitude versus age, one line per [Fe/H] (the population-correction surface);
    the mass-loss efficiency ``eta`` (or the table's ``eta`` column / meta) is named in the title."""
    fig, ax = (new_figure(width, 0.85) if ax is None else (ax.figure, ax))
    feh = np.asarray(table["feh"], float)
    age = np.asarray(table["age_gyr"], float)
    mag = np.asarray(table[f"M_{band}"], float)
    for f in np.unique(np.round(feh, 6)):
        sel = np.isclose(feh, f)
        ax.plot(age[sel], mag[sel], marker="o", ms=2.5, label=format_feh(f))
    ax.set_xlabel("age [Gyr]")
    ax.set_ylabel(f"clump $M_{{{band}}}$ [mag]")
    invert_mag_axis(ax)
    if eta is None:
        eta = table.meta.get("eta") if hasattr(table, "meta") else None
        if eta is None and "eta" in table.colnames:
            eta = float(np.asarray(table["eta"], float)[0])
    ax.set_title(f"red-clump peak in {band}" + (f", Reimers η = {float(eta):g}" if eta is not None else ""))
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    return fig, ax


# ------------------------------------------------------------------------------------- clump LF
_LF_STYLE = {"clump": (OKABE_ITO["vermillion"], "--", "red clump"), "rgb": (OKABE_ITO["blue"], "-.", "RGB background"),
             "bump": (OKABE_ITO["bluish_green"], ":", "RGB bump"), "agb": (OKABE_ITO["orange"], ":", "AGB bump")}


@styled
def plot_clump_lf(mag, result, ax=None, *, bin_mag: float | None = None, band: str | None = None, title=None,
                  width="column"):
    """Histogram of the stars in ``result.mag_range`` with the fitted total density and each component
    (the clump and the bumps drawn on top of the RGB background, so a small bump is visible), scaled to
    counts per bin; an unclean fit names the ill-determined component in the panel."""
    import math

    from hbmodel.outputs.reports import lf_failed_components
    m = np.asarray(mag, dtype=float).ravel()
    if not np.all(np.isfinite(m)):
        raise ValueError("mag contains NaN or infinite magnitudes; remove them before plotting")
    lo, hi = result.mag_range
    m = m[(m >= lo) & (m <= hi)]
    if bin_mag is None:
        bin_mag = max((hi - lo) / 120.0, min(0.05, (hi - lo) / max(math.sqrt(max(m.size, 1)), 10.0)))
    if not bin_mag > 0:
        raise ValueError(f"bin_mag must be positive, got {bin_mag!r}")
    fig, ax = (new_figure(width, 0.8) if ax is None else (ax.figure, ax))
    nb = max(int(round((hi - lo) / bin_mag)), 1)
    counts, edges, _ = ax.hist(m, bins=nb, range=(lo, hi), histtype="step", color="0.35",
                               label=f"stars (N = {m.size})")
    scale = m.size * (hi - lo) / nb
    grid = np.linspace(lo, hi, 600)
    total = scale * result.density(grid)
    ax.plot(grid, total, color=OKABE_ITO["black"], lw=1.4, label="total model")
    comps = result.component_densities(grid)
    bg = comps.get("rgb", np.zeros_like(grid))
    for name, dens in comps.items():
        color, ls, label = _LF_STYLE.get(name, ("0.5", "--", name))
        y = dens if name == "rgb" else dens + bg  # peaks drawn on the background they sit on
        if name in ("bump", "agb"):
            label += f" ({100 * result.params.get(f'{name}_ratio', 0.0):.0f} % of clump)"
        ax.plot(grid, scale * y, ls=ls, color=color, label=label)
    ax.axvline(result.peak_mag, color=OKABE_ITO["vermillion"], lw=0.7, alpha=0.6)
    ax.set_xlabel(mag_label(band) if band else "magnitude [mag]")
    ax.set_ylabel(f"stars per {bin_mag:.3g} mag")
    ax.set_ylim(0, 1.7 * max(counts.max(), total.max(), 1))  # headroom for the legend above the peak
    if title:
        ax.set_title(title)
    leg_title = None
    if not result.converged:
        failed = lf_failed_components(result)
        leg_title = "unclean: " + (", ".join(failed) if failed else "optimiser") + " ill-determined"
    centres = 0.5 * (edges[1:] + edges[:-1])
    place_legend(ax, np.concatenate([centres, grid]), np.concatenate([counts, total]), title=leg_title,
                 title_fontsize=6.5)
    return fig, ax


# ------------------------------------------------------------------------------------- fit figures
def _fit_bins(est, nbins):
    cmin, cmax, mb, mf = est.region_
    ce = np.linspace(cmin, cmax, nbins[0] + 1)
    me = np.linspace(mb, mf, nbins[1] + 1)
    obs, _, _ = np.histogram2d(est.data_["mag"], est.data_["colour"], bins=(me, ce))
    return ce, me, obs


def _user_colour(est, ce, *images):
    """Colour edges, images (columns along colour) and label on the user's colour axis: a fit run with
    ``colour=(B, A)`` of bands (A, B) works internally in A - B and shows B - A, the images mirrored."""
    sgn = getattr(est, "_colour_sign", 1.0)
    a, b = getattr(est, "colour_", None) or est.bands
    if sgn > 0:
        return ce, images, sgn, colour_label(a, b)
    return -ce[::-1], tuple(img[..., ::-1] for img in images), sgn, colour_label(a, b)


def _hpd_levels(density, fractions):
    """Density levels enclosing ``fractions`` of the total (highest-density regions)."""
    d = np.sort(density.ravel())[::-1]
    cum = np.cumsum(d) / max(d.sum(), 1e-300)
    return np.unique([d[min(np.searchsorted(cum, f), d.size - 1)] for f in sorted(fractions, reverse=True)])


@styled
def plot_fit_cmd(est, *, width="column", nbins=(120, 120)):
    """The catalogue over the MAP model density: a filled image of the bin-integrated model (Gaussian-
    smoothed by one bin) with contours enclosing 50, 80 and 95 % of the model stars."""
    from scipy.ndimage import gaussian_filter
    est._fitted()
    ce, me, _ = _fit_bins(est, nbins)
    model = gaussian_filter(est._binned_model(est.map_theta_, ce, me, sub=3), 1.0)
    b0 = est.bands[0]
    ce, (model,), sgn, xlabel = _user_colour(est, ce, model)
    col = sgn * np.asarray(est.data_["colour"])
    fig, ax = new_figure(width, 1.25)
    ax.pcolormesh(ce, me, model, cmap="Blues", shading="flat", rasterized=True,
                  vmin=0, vmax=np.quantile(model[model > 0], 0.995) if np.any(model > 0) else 1)
    cc, mc = 0.5 * (ce[1:] + ce[:-1]), 0.5 * (me[1:] + me[:-1])
    levels = _hpd_levels(model, (0.5, 0.8, 0.95))
    if levels.size and np.ptp(model) > 0:
        ax.contour(cc, mc, model, levels=levels, colors=OKABE_ITO["orange"], linewidths=0.8)
        ax.plot([], [], color=OKABE_ITO["orange"], lw=0.8, label="model: 50/80/95 % of stars")
    ax.scatter(col, est.data_["mag"], s=2, lw=0, color=OKABE_ITO["black"], alpha=0.8,
               rasterized=True, label=f"catalogue (N = {est.n_stars_})")
    ax.set_xlim(ce[0], ce[-1])
    ax.set_ylim(me[-1], me[0])
    ax.set_xlabel(xlabel)
    ax.set_ylabel(mag_label(b0))
    ax.set_title("catalogue over the MAP model density")
    place_legend(ax, col, est.data_["mag"], markerscale=2.5)
    return fig, ax


@styled
def plot_fit_hess(est, *, width="page", nbins=(40, 40)):
    """Observed, MAP-model (bin-integrated) and residual Hess diagrams with labelled colour bars."""
    est._fitted()
    ce, me, obs = _fit_bins(est, nbins)
    model = est._binned_model(est.map_theta_, ce, me)
    res = (obs - model) / np.sqrt(np.maximum(model, 0.5))
    b0 = est.bands[0]
    ce, (obs, model, res), _, xlabel = _user_colour(est, ce, obs, model, res)
    fig, axes = new_figure(width, 0.36, ncols=3, sharey=True)
    vmax = max(obs.max(), model.max(), 1)
    from matplotlib.colors import PowerNorm
    panels = ((obs, "observed", dict(cmap="cividis", norm=PowerNorm(0.5, 0, vmax)), "stars per bin (√ scale)"),
              (model, "model (MAP)", dict(cmap="cividis", norm=PowerNorm(0.5, 0, vmax)), "model stars per bin (√ scale)"),
              (res, "residual", dict(cmap=DIVERGING_CMAP, vmin=-4, vmax=4), "(obs − model) / √model"))
    for ax, (img, title, kw, clabel) in zip(axes, panels):
        im = ax.pcolormesh(ce, me, img, shading="flat", rasterized=True, **kw)
        ax.set_title(title)
        ax.set_xlabel(xlabel)
        cb = fig.colorbar(im, ax=ax, shrink=0.9)
        cb.set_label(clabel)
    axes[0].set_ylabel(mag_label(b0))
    axes[0].set_ylim(me[-1], me[0])
    return fig, axes


def _round_title(key, v):
    from hbmodel.outputs.reports import format_value
    lo, med, hi = np.percentile(v, [16, 50, 84])
    return f"{format_value(med, hi - med, med - lo)}"


@styled
def plot_corner(est, keys=None, *, truth: dict | None = None, width=None):
    """Corner plot of the posterior, drawn by the ``corner`` package (Foreman-Mackey 2016, JOSS 1, 24):
    1-D histograms with the median (solid) and the 16/84 % quantiles (dashed) and the value as a title;
    2-D histograms (smoothed by 0.8 bin) with 1σ/2σ contours below; ``truth`` values (when known) as lines and markers."""
    import corner
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    from hbmodel.io.figures import COLUMN_WIDTH_IN, PAGE_WIDTH_IN

    est._fitted()
    post = est.posterior_
    keys = keys or [k for k in ("mass_loss", "mass_loss_sd", "helium_fraction", "delta_y", "age",
                                "distance_modulus", "ebv", "field_fraction") if k in post and np.std(post[k]) > 0]
    truth = {k: float(v) for k, v in (truth or {}).items() if v is not None and k in keys}
    d = len(keys)
    if d == 0:
        raise ValueError("no sampled parameter varies in the posterior: nothing to plot")
    width = width or ("column" if d <= 2 else "page")
    w = float({"column": COLUMN_WIDTH_IN, "page": PAGE_WIDTH_IN}.get(width, width))
    fig = Figure(figsize=(w, w))  # corner places the panels itself (no layout engine while it draws)
    FigureCanvasAgg(fig)
    axes = fig.subplots(d, d, squeeze=False)
    data = np.column_stack([np.asarray(post[k], float) for k in keys])
    corner.corner(data, fig=fig, bins=30, smooth=0.8, labels=[axis_label(k) for k in keys], color=OKABE_ITO["black"],
                  quantiles=[0.16, 0.84], levels=(1 - np.exp(-0.5), 1 - np.exp(-2.0)), plot_datapoints=True,
                  data_kwargs={"alpha": 0.15, "ms": 1.0},
                  truths=[truth.get(k) for k in keys] if truth else None, truth_color=OKABE_ITO["vermillion"],
                  label_kwargs={"fontsize": 7}, max_n_ticks=4)
    for i, k in enumerate(keys):
        ax = axes[i, i]
        x = data[:, i]
        for ln in ax.lines:  # corner's quantile lines in the figure's colours
            if ln.get_linestyle() == "--":
                ln.set_color(OKABE_ITO["blue"])
                ln.set_linewidth(0.8)
        ax.axvline(np.median(x), color=OKABE_ITO["blue"], lw=1.0)
        ax.set_title(_round_title(k, x), fontsize=7, loc="right" if i == d - 1 else "center")  # inside the page
    for ax in axes.ravel():
        ax.tick_params(labelsize=6)
        ax.minorticks_off()  # 25 panels: minor ticks only clutter (and slow the drawing)
    handles = ([Line2D([], [], color=OKABE_ITO["vermillion"], label="truth")] if truth else []) + [
        Line2D([], [], color=OKABE_ITO["blue"], label="median"),
        Line2D([], [], color=OKABE_ITO["blue"], ls="--", label="16 / 84 %")]
    if d > 1:  # the empty upper triangle holds the legend
        fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(0.98, 0.98))
    else:
        axes[0, 0].legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    fig.set_layout_engine("constrained")  # then the journal layout, as every other figure
    return fig, axes


@styled
def plot_hb_mass(est, *, truth: dict | None = None, width="column"):
    """Posterior HB-mass distribution: median density and 16-84 % band; the true mean (when known)."""
    grid, (lo, med, hi) = est.hb_mass_distribution()
    fig, ax = new_figure(width, 0.75)
    ax.fill_between(grid, lo, hi, color=OKABE_ITO["sky_blue"], alpha=0.5, lw=0, label="16–84 %")
    ax.plot(grid, med, color=OKABE_ITO["blue"], label="posterior median")
    if truth and truth.get("hb_mass_mean") is not None:
        ax.axvline(float(truth["hb_mass_mean"]), color=OKABE_ITO["vermillion"], lw=1.0, label="true mean")
    ax.set_xlabel(HB_MASS_LABEL)
    ax.set_ylabel(r"probability density [$M_\odot^{-1}$]")
    ax.set_ylim(bottom=0)
    place_legend(ax)
    return fig, ax


@styled
def plot_posterior_predictive(est, *, n_draws=60, nbins=(40, 40), p_value=None, seed=0, width="page"):
    """Posterior-predictive check: the observed magnitude and colour distributions of the fitted region
    against the 16-84 % range of Poisson replicates of posterior draws of the model."""
    est._fitted()
    rng = np.random.default_rng(seed)
    ce, me, obs = _fit_bins(est, nbins)
    chain = np.asarray(est.chain_theta_, float)
    idx = rng.choice(chain.shape[0], size=min(n_draws, chain.shape[0]), replace=False)
    reps = np.stack([rng.poisson(m) for m in est._binned_model(chain[idx], ce, me, sub=3)])  # one batched pass
    b0 = est.bands[0]
    ce, (obs, reps), _, clabel = _user_colour(est, ce, obs, reps)
    fig, axes = new_figure(width, 0.34, ncols=2)
    for ax, axis, edges, xlabel in ((axes[0], 1, me, mag_label(b0)), (axes[1], 0, ce, clabel)):
        o = obs.sum(axis=axis)
        r = reps.sum(axis=axis + 1)
        lo, med, hi = np.percentile(r, [16, 50, 84], axis=0)
        x = np.repeat(edges, 2)[1:-1]
        ax.fill_between(x, np.repeat(lo, 2), np.repeat(hi, 2), color=OKABE_ITO["sky_blue"], alpha=0.6, lw=0,
                        label="replicates 16–84 %")
        ax.plot(x, np.repeat(med, 2), color=OKABE_ITO["blue"], lw=0.8, label="replicate median")
        ax.plot(x, np.repeat(o, 2), color=OKABE_ITO["black"], lw=1.0, label="observed")
        ax.set_xlabel(xlabel)
        ax.set_ylabel(f"stars per {edges[1] - edges[0]:.2g} mag")
        ax.set_xlim(edges[0], edges[-1])
    invert_mag_axis(axes[0], "x")
    title = "posterior-predictive check"
    if p_value is not None:
        title += f" (Hess deviance p = {p_value:.2f})"
    fig.suptitle(title)
    place_legend(axes[1])
    return fig, axes
