"""Test and demo support: the forward model and the invented demo scenario.

Not used by the processing path (no stage imports it). :mod:`.simulate` needs SciPy, which
the ``test`` and ``demo`` extras install: ``pip install ".[demo]"``.
"""
