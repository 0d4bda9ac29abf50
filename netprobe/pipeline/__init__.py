"""The measurement pipeline: one point (model -> engine -> probes), ladders, assessment.

Modules
-------
``measure``
    :data:`PROBES` (the registry of bulk probes, :mod:`netprobe.probes.registry`), measured with an
    implementation per kind of ground state;
    :func:`measure` returns a :class:`Measurement`.
``point``
    :func:`probe_model` (ground states by any engine, then the probes on a region plan),
    :func:`probe_saved_state`.
``assess``
    :func:`assess_model`: region-size and bond-dimension ladders, the Markov-length certificate,
    extrapolations and a verdict.
"""

from netprobe.pipeline.measure import PROBES, Measurement, measure
from netprobe.pipeline.point import ProbeResult, RegionPlan, expand_region, probe_model, probe_saved_state

__all__ = ["PROBES", "Measurement", "measure", "ProbeResult", "RegionPlan", "expand_region", "probe_model",
           "probe_saved_state"]
