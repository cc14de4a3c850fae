"""The run layer: one floor below the API, the jobs and the CLI, above the store and the engine.

- :mod:`~app.runs.options`     the run options (one pydantic model, every bound written once)
- :mod:`~app.runs.admission`   datasets in: uploads, local files, registrations
- :mod:`~app.runs.sandbox`     file validation in a spawned, limited child process
- :mod:`~app.runs.paths`       the data-root rule for registrations
- :mod:`~app.runs.submission` submitting experiments and comparisons
- :mod:`~app.runs.scoring`       scoring files into a result (the CLI and the score job)
- :mod:`~app.runs.compare`     comparing two results (the compare job)

Everything here raises domain errors (:mod:`app.errors`); nothing here speaks HTTP.
"""
