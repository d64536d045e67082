"""Photometric error model of a catalogue: the median error-magnitude relation of each band, with which the
surrogate's basis images (:mod:`hbmodel.inference.surrogate`) are convolved."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ErrorModel"]


@dataclass(frozen=True)
class ErrorModel:
    """Median photometric error vs observed magnitude per band (piecewise linear, constant beyond ends)."""

    mags: dict
    sigmas: dict

    @classmethod
    def from_catalog(cls, mags: dict, errs: dict, bin_mag: float = 0.25, min_per_bin: int = 5):
        """Median ``<band>_err`` in magnitude bins of each band (the error-magnitude relation)."""
        mm, ss = {}, {}
        for b in mags:
            m = np.asarray(mags[b], float)
            e = np.asarray(errs[b], float)
            if m.size == 0:
                raise ValueError(f"no stars to build the error-magnitude relation of band {b}")
            lo, hi = np.floor(m.min() / bin_mag) * bin_mag, np.ceil(m.max() / bin_mag) * bin_mag + bin_mag
            edges = np.arange(lo, hi + 1e-9, bin_mag)
            idx = np.digitize(m, edges) - 1
            cen, med = [], []
            for k in np.unique(idx):  # loop over a few magnitude bins, not stars
                sel = idx == k
                if sel.sum() >= min_per_bin:
                    cen.append(np.median(m[sel]))
                    med.append(np.median(e[sel]))
            if not cen:
                cen, med = [float(np.median(m))], [float(np.median(e))]
            mm[b] = np.asarray(cen)
            ss[b] = np.maximum.accumulate(np.asarray(med))  # errors do not fall with magnitude
        return cls(mm, ss)

    @classmethod
    def constant(cls, sigma_by_band: dict):
        return cls({b: np.array([0.0]) for b in sigma_by_band},
                   {b: np.array([float(s)]) for b, s in sigma_by_band.items()})

    def __call__(self, band, mag):
        return np.interp(np.asarray(mag, float), self.mags[band], self.sigmas[band])

    def key(self):
        return tuple((b, tuple(np.round(self.mags[b], 4)), tuple(np.round(self.sigmas[b], 5)))
                     for b in sorted(self.mags))
