"""What a fit gives back: the `Posterior`, its checks, figures, report and files.

- `posterior`: `Posterior` (samples, summaries, diagnostics, `save`);
- `checks`: posterior predictive p-values and standardized residuals;
- `figures`, `report`: the corner, fit and P–T figures and report.md;
- `writers`: the files of a fit's result folder, built in memory and written atomically.
"""
