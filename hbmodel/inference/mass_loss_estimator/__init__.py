"""The parts of :class:`hbmodel.inference.mass_loss_fit.MassLossFit`, one concept per module: the priors
(:mod:`.priors`), the catalogue and measured-mass preparation (:mod:`.data`), the parameter space and log
posterior (:mod:`.posterior`), the MAP search and model comparison (:mod:`.optimise`), the Laplace
approximation (:mod:`.laplace`), the emcee sampler (:mod:`.ensemble`), the derived quantities (:mod:`.derived`)
and the summaries and diagnostics of a fitted estimator (:mod:`.results`).  Import the estimator from
:mod:`hbmodel.inference.mass_loss_fit`."""
