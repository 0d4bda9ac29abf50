"""One registry of bulk probes (netprobe.probes.PROBES): the kernels, the pipeline and the study read it."""

import pytest

from netprobe.engines import ENGINES
from netprobe.errors import NetprobeError
from netprobe.pipeline import PROBES as PIPELINE_PROBES
from netprobe.pipeline.measure import check_probes
from netprobe.probes import MANY_BODY_PROBES, PROBES, STATE_KINDS
from netprobe.study.description import PROBES as STUDY_PROBES

# The study probe names are a fixed interface point (study files and their JSON keys use them).
STUDY_NAMES = ("energy", "energy_per_site", "entropy", "J", "c_minus", "cmi", "gamma", "chern_number", "mean:OP",
               "assessed_c_minus", "assessed_gamma")


def test_one_registry():
    assert PIPELINE_PROBES is PROBES
    assert tuple(STUDY_PROBES) == STUDY_NAMES
    for name, info in PROBES.items():
        assert info.name == name and info.kinds <= set(STATE_KINDS) and info.unit in ("nats", "1")
    assert set(MANY_BODY_PROBES) == {n for n, p in PROBES.items() if "many-body" in p.kinds}


@pytest.mark.parametrize("name", [n for n, k in STUDY_PROBES.items() if k.measures is not None])
def test_study_probe_engines_follow_the_registry(name):
    kind = STUDY_PROBES[name]
    implemented = PROBES[kind.measures].kinds
    assert kind.engines == {e for e, engine in ENGINES.items() if engine.kind in implemented}
    assert kind.unit == PROBES[kind.measures].unit


@pytest.mark.parametrize("kind", STATE_KINDS)
def test_pipeline_keeps_the_probes_a_kind_implements(kind):
    assert check_probes(tuple(PROBES), kind) == tuple(n for n, p in PROBES.items() if kind in p.kinds)
    with pytest.raises(NetprobeError, match="unknown probe 'Q'; valid probes: S, CMI, J, TEE, chern_number"):
        check_probes("S,Q", kind)
