"""Per-job tasks for :func:`hbmodel.batch.run_batch` (module-level, so they pickle to workers)."""
from __future__ import annotations

import numpy as np

__all__ = ["TASKS", "distance_task", "fit_task"]


def _f(job, key, default=None):
    v = job.get(key, default)
    if v is None or (isinstance(v, float) and not np.isfinite(v)) or (isinstance(v, str) and not v.strip()):
        return default
    return float(v)


def _bands(job, default):
    b = job.get("bands") or job.get("band") or default
    return tuple(x.strip() for x in str(b).replace(";", ",").split(",") if x.strip())


def distance_task(job: dict, job_dir) -> dict:
    """Red-clump distance of one field: columns catalog, band (or bands), feh, age or age_min/age_max, ebv."""
    from .clump_distance import measure_distance
    from .io import read_catalog
    from .population import MassLoss, Population
    band = _bands(job, "Ks")[0]
    t = read_catalog(job["catalog"], required=(band,))
    feh = _f(job, "feh", 0.0)
    ml = MassLoss.from_eta(_f(job, "eta", 0.3), 0.03)
    if _f(job, "age_min") is not None and _f(job, "age_max") is not None:
        ages = np.geomspace(_f(job, "age_min"), _f(job, "age_max"), 8)
        pop = Population.from_history(ages, np.gradient(ages), feh, alpha_fe=_f(job, "alpha_fe", 0.0), mass_loss=ml)
    else:
        pop = Population(feh, _f(job, "age", 4.0), alpha_fe=_f(job, "alpha_fe", 0.0), mass_loss=ml)
    err = np.asarray(t[f"{band}_err"], float) if f"{band}_err" in t.colnames else None
    r = measure_distance(np.asarray(t[band], float), pop, band, ebv=_f(job, "ebv", 0.0), ebv_sd=_f(job, "ebv_sd", 0.0),
                         mag_err=err, rng=np.random.default_rng(int(job.get("seed", 0)) % 2**32))
    return {"distance_modulus": r.distance_modulus, "distance_kpc": r.distance_kpc,
            "clump_peak_mag": r.clump_peak_mag, "clump_absmag": r.clump_absmag,
            "population_correction": r.population_correction, "ebv": r.ebv, "n_stars": r.n_stars}


def fit_task(job: dict, job_dir) -> dict:
    """Mass-loss fit of one cluster: columns catalog, bands, feh, alpha_fe, age, distance_modulus, dm_sd, ebv, ebv_sd."""
    from .fit import MassLossFit, Priors
    from .io import read_catalog
    from .population import Population
    bands = _bands(job, "V,I")
    if len(bands) != 2:
        raise ValueError("a fit job needs two bands, e.g. V,I")
    t = read_catalog(job["catalog"], required=[c for b in bands for c in (b, f"{b}_err")])
    pop = Population(_f(job, "feh"), _f(job, "age"), alpha_fe=_f(job, "alpha_fe", 0.0))
    dm = _f(job, "distance_modulus")
    if dm is None:
        raise ValueError("a fit job needs distance_modulus")
    pri = Priors(distance_modulus=(dm, _f(job, "dm_sd", 0.1)), ebv=(_f(job, "ebv", 0.0), _f(job, "ebv_sd", 0.02)))
    est = MassLossFit(population=pop, priors=pri, model=str(job.get("model", "spread") or "spread"), bands=bands,
                      seed=int(job.get("seed", 0)) % 2**32, compare_models=False)
    est.fit(t)
    out = dict(est.summary())
    out["converged"] = bool(est.converged_)
    out["n_stars"] = int(est.n_stars_)
    return out


TASKS = {"distance": distance_task, "fit": fit_task}
