"""The output stage: every figure and table (``netprobe.output.plots``)."""

__all__: list[str] = []
