"""Fitting a study: from the log-posterior to a converged chain.

- `log_posterior`: the vectorised log-posterior (`LogPosterior`) with derived-quantity blobs;
- `start`: starting the walkers (from the prior, or around the MAP);
- `sampler`: the emcee run with its stopping rule (`run_chain`, `assess_chain`);
- `checkpoint`: crash-safe records of a running chain, for resuming;
- `convergence`: split R-hat, diagnostics.json and the posterior's warnings;
- `progress`: the progress line of a running chain;
- `grid`: grid posteriors and evidence (few free parameters: surveys, cross-checks);
- `run`: `fit`, which ties these together and returns a `Posterior`.
"""
