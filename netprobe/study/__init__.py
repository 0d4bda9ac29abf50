"""Studies: parameter sweeps of a model over a grid of points and a ladder of bond dimensions.

Themes
------
Description
    ``description`` (study files in TOML: model, grid or point list, ladder, regions, probes,
    executor settings; :func:`load_study`, :class:`StudyDescription`).
Ledger
    ``ledger`` (one SQLite file in WAL mode per study folder: a task per (point, bond dimension),
    claimed atomically under leases, results as JSON; :class:`Ledger`).
Execution
    ``tasks`` (one task: model, ground state, probes; :func:`run_task`), ``executors`` (local
    spawned processes or ``dask.distributed``; :func:`run_study`).
Results
    ``verdicts`` (convergence against the bond dimension), ``report`` (the data of tables, transition
    estimates and phase maps; :func:`build_report`); the files themselves are written by
    :mod:`netprobe.output.study_report`.
"""

from netprobe.study.description import StudyDescription
from netprobe.study.reading import load_study, parse_study
from netprobe.study.executors import DaskExecutor, LocalExecutor, StudyRun, run_study
from netprobe.study.ledger import Ledger
from netprobe.study.report import build_report

__all__ = [
    "StudyDescription",
    "load_study",
    "parse_study",
    "Ledger",
    "LocalExecutor",
    "DaskExecutor",
    "StudyRun",
    "run_study",
    "build_report",
]
