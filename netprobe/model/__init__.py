"""The model stage: coupling expressions, model files, lattices, site spaces, terms and size limits.

Import from the modules themselves (``netprobe.model.spec``, ``netprobe.model.lattice``, ...).
"""

__all__: list[str] = []
