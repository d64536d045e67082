"""Data preparation of the mass-loss fit: a catalogue's CMD (columns, missing rows, error sanity, the
fitted region, the shift prior of the nuisance parameters, the surrogate and its likelihood) and a table of
measured masses."""
from __future__ import annotations

import numpy as np

from hbmodel.inference.error_model import ErrorModel
from hbmodel.inference.likelihood import CMDLikelihood
from hbmodel.inference.surrogate import build_surrogate, fit_constants, pixel_for_errors, population_extent

__all__ = ["observed_locus_scatter", "check_error_scale", "ERROR_SCALE_MAX_RATIO", "ERROR_SCALE_SLACK_MAG"]


#: Quoted colour errors may exceed the observed colour scatter of the catalogue's giant branch by at most
#: this factor (plus ``ERROR_SCALE_SLACK_MAG``) before the fit refuses them: the observed scatter includes
#: the errors, so quoted errors several times larger are in the wrong unit (millimag, a flux/sigma).
ERROR_SCALE_MAX_RATIO = 3.0
ERROR_SCALE_SLACK_MAG = 0.03


def observed_locus_scatter(colour, mag, bin_mag=0.25, min_stars=8):
    """Robust colour scatter (mag) of the narrowest sequence of a CMD: per ``bin_mag`` magnitude bin the
    normalised median absolute deviation of the colours about their median (1.4826 MAD, common
    practice), then the median over the bins holding at least ``min_stars`` stars (the RGB dominates most
    bins; the HB's wide colour range affects only a few).  NaN with too few stars."""
    colour, mag = np.asarray(colour, float), np.asarray(mag, float)
    if colour.size < min_stars:
        return float("nan")
    edges = np.arange(mag.min(), mag.max() + bin_mag, bin_mag)
    idx = np.digitize(mag, edges)
    out = []
    for k in np.unique(idx):
        c = colour[idx == k]
        if c.size >= min_stars:
            out.append(1.4826 * np.median(np.abs(c - np.median(c))))
    return float(np.median(out)) if out else float("nan")


def check_error_scale(colour, mag, colour_err, bands):
    """ValueError when the quoted photometric errors cannot be magnitudes: their median colour error is
    more than :data:`ERROR_SCALE_MAX_RATIO` times (+ :data:`ERROR_SCALE_SLACK_MAG`) the observed colour
    scatter of the CMD's narrowest sequence (:func:`observed_locus_scatter`)."""
    obs = observed_locus_scatter(colour, mag)
    quoted = float(np.median(colour_err))
    if np.isfinite(obs) and quoted > ERROR_SCALE_MAX_RATIO * obs + ERROR_SCALE_SLACK_MAG:
        b1, b2 = bands
        raise ValueError(f"the quoted errors {b1}_err, {b2}_err (median colour error {quoted:.3g} mag) are "
                         f"{quoted / max(obs, 1e-6):.0f}x the observed colour scatter of the giant branch "
                         f"({obs:.3g} mag): they cannot be magnitude errors - are they in millimag, or a "
                         f"signal-to-noise (flux over error) column? Give 1-sigma errors in magnitudes")


def _read_table_like(t, what):
    from astropy.table import Table
    if isinstance(t, Table):
        return t
    if isinstance(t, dict):
        try:
            return Table({k: np.asarray(v) for k, v in t.items()})
        except Exception as exc:
            raise ValueError(f"cannot make a table from the {what} columns: {exc}") from None
    raise ValueError(f"{what} must be an astropy Table or a dict of columns, got {type(t).__name__}")


class _DataMixin:
    """Catalogue and measured-mass preparation of :class:`~hbmodel.inference.mass_loss_fit.MassLossFit`."""

    def _prepare_cmd(self, catalog, pri, bands):
        from hbmodel.photometry.extinction import extinction_ratio
        from hbmodel.io.catalogues import check_errors, drop_missing
        t = _read_table_like(catalog, "catalogue")
        if len(t) == 0:
            raise ValueError("the catalogue is empty")
        need = [b for b in bands] + [f"{b}_err" for b in bands]
        miss = [c for c in need if c not in t.colnames]
        if miss:
            raise ValueError(f"catalogue lacks column(s) {', '.join(miss)} (available: {', '.join(t.colnames[:20])})")
        t, self.n_dropped_ = drop_missing(t, need)   # missing magnitudes or errors: dropped and counted
        check_errors(t, bands)
        mags = {b: np.asarray(t[b], float) for b in bands}
        errs = {b: np.asarray(t[f"{b}_err"], float) for b in bands}
        for b in bands:
            if not np.all(np.isfinite(mags[b])):
                raise ValueError(f"column {b!r} has NaN or infinite magnitudes")
        if pri.distance_modulus is None:
            raise ValueError("a CMD fit needs a distance-modulus prior (--distance-modulus DM [--dm-sd S])")
        comp = self.population.components[0]
        cst = fit_constants()
        self.age0_ = comp.age_gyr
        ext_col, ext_mag, m_base, teff_ref = population_extent(feh=comp.feh, alpha_fe=comp.alpha_fe,
                                                               age_gyr=comp.age_gyr,
                                                               helium=self.population.helium, bands=bands)
        r1 = float(extinction_ratio(bands[0], teff_ref, self.rv, self.law))
        r2 = float(extinction_ratio(bands[1], teff_ref, self.rv, self.law))
        # shift prior (linear map of Gaussian DM, E, dc, dm)
        dm0, dmsd = (float(v) for v in pri.distance_modulus)
        e0, esd = (float(v) for v in pri.ebv)
        if self.zero_points:
            sdc = pri.colour_offset_sd if pri.colour_offset_sd is not None else cst["colour_offset_sd"]
            sdm = pri.mag_offset_sd if pri.mag_offset_sd is not None else cst["mag_offset_sd"]
        else:
            sdc = sdm = 0.0
        A = np.array([[0.0, r1 - r2, 1.0, 0.0], [1.0, r1, 0.0, 1.0]])  # (s_c, s_m) = A @ (DM, E, dc, dm)
        mu4 = np.array([dm0, e0, 0.0, 0.0])
        cov4 = np.diag([dmsd ** 2, esd ** 2, sdc ** 2, sdm ** 2])
        self._nuis = dict(A=A, mu4=mu4, cov4=cov4, r1=r1, r2=r2)
        s_mu = A @ mu4
        s_cov = A @ cov4 @ A.T
        self._shift_mu, self._shift_cov = s_mu, s_cov
        self._shift_icov = np.linalg.inv(s_cov)
        s_sd = np.sqrt(np.diag(s_cov))
        self._shift_sd = s_sd
        # fitted region (observed)
        if self.region is None:
            cmin = float(np.quantile(ext_col, 0.002)) - 0.15
            cmax = float(np.quantile(ext_col, 0.998)) + 0.20
            mb = float(np.min(ext_mag)) - 0.5
            mf = min(float(np.max(ext_mag)) + 0.5, m_base - 0.25)
            region = (cmin + s_mu[0], cmax + s_mu[0], mb + s_mu[1], mf + s_mu[1])
        else:
            region = tuple(float(v) for v in self.region)
            if len(region) != 4 or not all(np.isfinite(region)) or region[1] <= region[0] or region[3] <= region[2]:
                raise ValueError("region must be (colour_min, colour_max, mag_bright, mag_faint) with min < max")
            if self._colour_sign < 0:  # the user's colour box -> the internal bands[0] - bands[1] colour
                region = (-region[1], -region[0], region[2], region[3])
            if region[3] - s_mu[1] > m_base:
                raise ValueError(f"region reaches fainter than the modelled RGB base (M = {m_base:.2f} "
                                 f"+ DM = {m_base + s_mu[1]:.2f}): sub-giants are not modelled")
        self.region_ = region
        colour = mags[bands[0]] - mags[bands[1]]
        mag = mags[bands[0]]
        inr = (colour >= region[0]) & (colour <= region[1]) & (mag >= region[2]) & (mag <= region[3])
        if not inr.any():
            c_lo, c_hi = self._user_region(region)[:2]
            raise ValueError(f"no stars in the fitted region ({'-'.join(self.colour_)} {c_lo:.2f}..{c_hi:.2f}, "
                             f"{bands[0]} {region[2]:.2f}..{region[3]:.2f})")
        check_error_scale(colour[inr], mag[inr], np.hypot(errs[bands[0]][inr], errs[bands[1]][inr]), bands)
        near = (mag >= region[2] - 1.0) & (mag <= region[3] + 1.0)
        em = self.error_model or ErrorModel.from_catalog({b: mags[b][near] for b in bands},
                                                         {b: errs[b][near] for b in bands})
        self.error_model_ = em
        # differential reddening: stars move along the reddening vector; the images reach two of the
        # largest spreads further so that stars scattered into the region from outside are modelled
        red_vec = np.array([r1 - r2, r1])
        spread_hi = float(pri.ebv_spread[1]) if pri.ebv_spread is not None else 0.0
        pad_c = 4.0 * s_sd[0] + 0.15 + 2.0 * spread_hi * abs(red_vec[0])
        pad_m = 4.0 * s_sd[1] + 0.15 + 2.0 * spread_hi * abs(red_vec[1])
        self._shift_lo = s_mu - 4.0 * s_sd
        self._shift_hi = s_mu + 4.0 * s_sd
        col_range = (region[0] - s_mu[0] - pad_c, region[1] - s_mu[0] + pad_c)
        mag_range = (region[2] - s_mu[1] - pad_m, region[3] - s_mu[1] + pad_m)
        dy_max = float(pri.delta_y[1]) if (self.model != "spread" or self.compare_models) else 0.0
        self.surrogate_ = build_surrogate(feh=comp.feh, alpha_fe=comp.alpha_fe, age_gyr=comp.age_gyr,
                                          helium=self.population.helium, bands=bands, err_model=em,
                                          col_range=col_range, mag_range=mag_range, shift_c=float(s_mu[0]),
                                          shift_m=float(s_mu[1]), age_sd_gyr=pri.age_sd_gyr or 0.0,
                                          delta_y_max=dy_max,
                                          pixel=pixel_for_errors(np.hypot(errs[bands[0]][inr],
                                                                          errs[bands[1]][inr])),
                                          extinction=(e0, float(self.rv), self.law, r1, r2))
        self.likelihood_ = CMDLikelihood(self.surrogate_, colour[inr], mag[inr], region, self.completeness,
                                         shift_lo=self._shift_lo, shift_hi=self._shift_hi,
                                         reddening_vector=red_vec, spread_max=spread_hi)
        self.data_ = {"colour": colour[inr], "mag": mag[inr]}


    def _prepare_masses(self, masses):
        t = _read_table_like(masses, "masses")
        # mass, mass_err (or the unit-suffixed mass_msun, mass_msun_err of a mock) and phase
        from hbmodel.io.catalogues import pick_column
        m = np.asarray(t[pick_column(t, "mass", "masses table")], float)
        e = np.asarray(t[pick_column(t, "mass_err", "masses table")], float)
        if "phase" not in t.colnames:
            raise ValueError("masses table lacks column 'phase' (need mass, mass_err, phase)")
        ph = np.char.lower(np.asarray(t["phase"]).astype(str))
        if len(m) == 0:
            raise ValueError("the masses table is empty")
        if not np.all(np.isfinite(m)) or np.any(m <= 0):
            raise ValueError("masses must be finite and positive")
        if not np.all(np.isfinite(e)) or np.any(e <= 0):
            raise ValueError("mass_err must be finite and > 0 (NaN or non-positive errors found)")
        bad = sorted(set(ph) - {"rgb", "clump"})
        if bad:
            raise ValueError(f"phase must be 'rgb' or 'clump' (found {', '.join(bad)})")
        rgb, cl = ph == "rgb", ph == "clump"
        if not rgb.any() or not cl.any():
            raise ValueError("the masses table needs both RGB and clump stars")
        self._masses = dict(m_rgb=m[rgb], e_rgb=e[rgb], m_cl=m[cl], e_cl=e[cl])


    def _user_region(self, region):
        """An internal (bands[0] - bands[1]) region in the user's ``colour`` convention."""
        if self._colour_sign > 0:
            return tuple(region)
        return (-region[1], -region[0], region[2], region[3])
