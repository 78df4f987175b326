"""Reaches x events over one or many configs: check, schedule reach tasks, assemble the outputs.

- ``run``: :func:`run` (behind ``geoflow run`` and ``geoflow.run``);
- ``validate``: :func:`check` (behind ``geoflow check``), the validation ``run`` does first;
- ``inputs`` / ``reach``: a config's opened inputs and the per-reach stage wiring (in memory);
- ``tasks``: one reach task (sections -> n -> profiles -> maps -> part files);
- ``engines``: in-process, local process pool or Dask;
- ``manifest`` / ``assemble``: what was computed from which inputs; the run-level outputs.
"""
from .run import RunResult, run
from .validate import CheckResult, check

__all__ = ["CheckResult", "RunResult", "check", "run"]
