"""Nightly batch conversion of an inbox folder (``countmill batch``); see ``docs/batch.md``.

- :mod:`countmill.batch.runner`: one run, from lock to summary (:func:`run_batch`);
- :mod:`countmill.batch.inbox`: which files are new, done, settling or in conflict;
- :mod:`countmill.batch.manifest`: what was converted (SQLite);
- :mod:`countmill.batch.lock`: one run per output folder (``fcntl.flock``);
- :mod:`countmill.batch.work`: one task per file, serial, local processes or Dask;
- :mod:`countmill.batch.summary`: the JSON report.
"""

from countmill.batch.runner import BatchOptions, BatchReport, run_batch

__all__ = ["BatchOptions", "BatchReport", "run_batch"]
