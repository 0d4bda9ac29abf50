"""The one memory-budget policy shared by the exact engine and the reduced-state routes."""

import os

import pytest

from netprobe import rdm, resources
from netprobe.errors import MemoryBudgetError
from netprobe.engines.exact import ExactOptions


def test_default_budget_is_half_the_physical_memory():
    # physical memory from the operating system (common practice: sysconf pages times page size)
    physical = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    assert resources.default_memory_budget() == int(physical * 0.5)
    # both engines read the same policy
    assert ExactOptions().budget() == resources.default_memory_budget()
    assert rdm.default_memory_budget is resources.default_memory_budget


def test_refusal_is_one_line_with_estimate_budget_and_hint():
    resources.check_memory_budget(10, 100, "a small thing")  # fits: no error
    with pytest.raises(MemoryBudgetError, match=r"^a big thing would need about 3 GiB, over the memory budget of "
                                                r"1 GiB; use fewer sites"):
        resources.check_memory_budget(3 * 2**30, 2**30, "a big thing")


@pytest.mark.parametrize("nbytes, text", [(512, "512 B"), (20 * 2**10, "20 KiB"), (1.5 * 2**20, "1.5 MiB"),
                                          (3 * 2**30, "3 GiB")])
def test_byte_formatter_picks_the_unit(nbytes, text):
    assert resources.format_bytes(nbytes) == text
