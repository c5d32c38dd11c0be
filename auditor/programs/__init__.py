"""Readers of model programs (Stan, PyMC source) into one :class:`ProgramSummary`."""
