"""The invented demo scenarios and the simulator that writes their data.

Kept light on import: :mod:`orbitmass.demo.simulate` is used by tests and
examples without loading the fitting machinery; the demo run itself is
:func:`orbitmass.demo.run.run_demo`.
"""
