"""Bayes Auditor: audit a Bayesian analysis workflow from its files."""

__version__ = "0.1.0"
TOOL_NAME = "bayes-auditor"
