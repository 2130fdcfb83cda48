"""Studies: a TOML description of a parameter study -> resumable batch run -> results & report.

Pipeline (each module imports only from the ones before it):
:mod:`~ringkit.study.quantities` and :mod:`~ringkit.study.schema` (units, keys) ->
:mod:`~ringkit.study.config` (validation) -> :mod:`~ringkit.study.plan` (work units with
stable ids) -> :mod:`~ringkit.study.checkpoint` (resumable layout) ->
:mod:`~ringkit.study.setup` and :mod:`~ringkit.study.compute` (physics of a unit) ->
:mod:`~ringkit.study.runner` (executors, progress) -> :mod:`~ringkit.study.analyse`,
:mod:`~ringkit.study.figures`, :mod:`~ringkit.study.report` (netCDF, figures, summary.json,
report). Importing this package loads neither kwant nor matplotlib.

Public API
----------
load_config(path, overrides=None), parse_config(text, ...) -> StudyConfig
default_study_text(), example_config_text() -> str
make_plan(config) -> StudyPlan
run_study(config, out_dir, *, executor=None, progress=True, restart=False) -> StudyOutcome
"""

from __future__ import annotations

from ringkit.study.config import (
    ConfigError,
    StudyConfig,
    default_study_text,
    load_config,
    parse_config,
)
from ringkit.study.example import example_config_text
from ringkit.study.plan import StudyPlan, WorkUnit, make_plan
from ringkit.study.runner import StudyOutcome, UnitFailed, run_study

__all__ = [
    "ConfigError",
    "StudyConfig",
    "default_study_text",
    "example_config_text",
    "load_config",
    "parse_config",
    "StudyPlan",
    "WorkUnit",
    "make_plan",
    "StudyOutcome",
    "UnitFailed",
    "run_study",
]
