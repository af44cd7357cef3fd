"""Builders shared by test modules in several folders of the test tree (no tests here).

targets: invented simulated targets and tiny fits; results: posteriors built without
sampling; orbit_reference: orbit formulas written independently of orbitmass.core.orbit.
"""
