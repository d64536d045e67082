"""Per-job tasks for :func:`hbmodel.io.jobs.run_batch` (module-level, so they pickle to workers), and the
JOBS-table columns each task understands (:data:`JOB_SCHEMAS`, checked by ``hbmodel batch``)."""
from __future__ import annotations

import numpy as np

from hbmodel.io.jobs import JobColumn, JobSchema, as_float, as_text

__all__ = ["TASKS", "JOB_SCHEMAS", "distance_task", "fit_task"]

_MISSING = object()


def _f(job, key, default=_MISSING):
    """Option ``key`` of a job as a float; a required option (no default) that is absent is an error."""
    v = job.get(key)
    if v is None or (isinstance(v, float) and not np.isfinite(v)) or (isinstance(v, str) and not v.strip()):
        if default is _MISSING:
            raise ValueError(f"job {job.get('name')!r} needs the option {key!r}")
        return default
    return as_float(v)


def _band_list(value):
    from hbmodel.photometry.magnitudes import parse_bands
    return ",".join(parse_bands(value, None))


def _one_band(value):
    from hbmodel.photometry.magnitudes import resolve_band
    return resolve_band(str(value))


def _two_bands(value):
    from hbmodel.photometry.magnitudes import parse_bands
    return ",".join(parse_bands(value, None, n=2))


def _model(value):
    from hbmodel.inference.mass_loss_fit import MODELS
    text = as_text(value)
    if text not in MODELS:
        raise ValueError(f"{text!r} is not one of {', '.join(MODELS)}")
    return text


def _bands(job, n=None):
    from hbmodel.photometry.magnitudes import parse_bands
    b = job.get("bands") or job.get("band")
    if b is None:
        raise ValueError(f"job {job.get('name')!r} needs the option 'band' or 'bands'")
    return parse_bands(b, None, n=n)


_CATALOG = JobColumn(as_text, True, "the job's catalogue file")
_FEH = JobColumn(as_float, True, "[Fe/H] of the population (dex)")

#: JOBS-table columns per task (besides ``name`` and ``seed``); see :func:`hbmodel.io.jobs.validate_jobs`.
JOB_SCHEMAS = {
    "distance": JobSchema({
        "catalog": _CATALOG,
        "band": JobColumn(_one_band, False, "band of the clump luminosity function"),
        "bands": JobColumn(_band_list, False, "bands; the first is the clump band"),
        "feh": _FEH,
        "age": JobColumn(as_float, False, "age in Gyr"),
        "age_min": JobColumn(as_float, False, "youngest age of constant star formation (Gyr)"),
        "age_max": JobColumn(as_float, False, "oldest age of constant star formation (Gyr)"),
        "alpha_fe": JobColumn(as_float, False, "[alpha/Fe] (default 0)"),
        "ebv": JobColumn(as_float, True, "E(B-V) of the field"),
        "ebv_sd": JobColumn(as_float, False, "uncertainty of E(B-V) (default 0)"),
        "eta": JobColumn(as_float, False, "Reimers eta (default 0.3)"),
    }, alternatives=((("band",), ("bands",)), (("age",), ("age_min", "age_max")))),
    "fit": JobSchema({
        "catalog": _CATALOG,
        "bands": JobColumn(_two_bands, True, "the two bands FIRST,SECOND"),
        "feh": _FEH,
        "age": JobColumn(as_float, True, "age in Gyr"),
        "alpha_fe": JobColumn(as_float, False, "[alpha/Fe] (default 0)"),
        "distance_modulus": JobColumn(as_float, True, "prior mean of the distance modulus"),
        "dm_sd": JobColumn(as_float, False, "prior width of the distance modulus (default 0.1)"),
        "ebv": JobColumn(as_float, False, "prior mean of E(B-V) (default 0)"),
        "ebv_sd": JobColumn(as_float, False, "prior width of E(B-V) (default 0.02)"),
        "model": JobColumn(_model, False, "spread, helium or both (default spread)"),
    }),
}


def distance_task(job: dict, job_dir) -> dict:
    """Red-clump distance of one field: columns catalog, band (or bands), feh, age or age_min/age_max, ebv."""
    from hbmodel.inference.clump_distance import measure_distance
    from hbmodel.io.catalogues import read_catalog
    from hbmodel.populations.population import MassLoss, Population
    band = _bands(job)[0]
    t = read_catalog(job["catalog"], required=(band,))
    feh = _f(job, "feh")
    ml = MassLoss.from_eta(_f(job, "eta", 0.3), 0.03)
    if _f(job, "age_min", None) is not None and _f(job, "age_max", None) is not None:
        pop = Population.constant_star_formation(_f(job, "age_min"), _f(job, "age_max"), feh,
                                                 alpha_fe=_f(job, "alpha_fe", 0.0), mass_loss=ml)
    else:
        pop = Population(feh, _f(job, "age"), alpha_fe=_f(job, "alpha_fe", 0.0), mass_loss=ml)
    err = np.asarray(t[f"{band}_err"], float) if f"{band}_err" in t.colnames else None
    r = measure_distance(np.asarray(t[band], float), pop, band, ebv=_f(job, "ebv"), ebv_sd=_f(job, "ebv_sd", 0.0),
                         mag_err=err, rng=np.random.default_rng(int(job.get("seed", 0)) % 2**32))
    return {"distance_modulus": r.distance_modulus, "distance_kpc": r.distance_kpc,
            "clump_peak_mag": r.clump_peak_mag, "clump_absmag": r.clump_absmag,
            "population_correction": r.population_correction, "ebv": r.ebv, "n_stars": r.n_stars}


def fit_task(job: dict, job_dir) -> dict:
    """Mass-loss fit of one cluster: columns catalog, bands, feh, alpha_fe, age, distance_modulus, dm_sd, ebv, ebv_sd."""
    from hbmodel.inference.mass_loss_fit import MassLossFit, Priors
    from hbmodel.io.catalogues import read_catalog
    from hbmodel.populations.population import Population
    bands = _bands(job, n=2)
    t = read_catalog(job["catalog"], required=[c for b in bands for c in (b, f"{b}_err")])
    pop = Population(_f(job, "feh"), _f(job, "age"), alpha_fe=_f(job, "alpha_fe", 0.0))
    dm = _f(job, "distance_modulus")
    pri = Priors(distance_modulus=(dm, _f(job, "dm_sd", 0.1)), ebv=(_f(job, "ebv", 0.0), _f(job, "ebv_sd", 0.02)))
    est = MassLossFit(population=pop, priors=pri, model=str(job.get("model", "spread") or "spread"), bands=bands,
                      seed=int(job.get("seed", 0)) % 2**32, compare_models=False)
    est.fit(t)
    out = dict(est.summary())
    out["converged"] = bool(est.converged_)
    out["n_stars"] = int(est.n_stars_)
    return out


TASKS = {"distance": distance_task, "fit": fit_task}
