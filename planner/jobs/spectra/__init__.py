"""planner.jobs.spectra: plan, assess, design and fit with whole spectra."""
