"""Bayes Auditor: audit a Bayesian analysis workflow from its files."""

__version__ = "0.1.0"
TOOL_NAME = "bayes-auditor"


def audit(*args, **kwargs):  # noqa: ANN002, ANN003, ANN201 - see auditor.api.audit
    """Audit a project, files or draws in memory (:func:`auditor.api.audit`)."""
    from auditor.api import audit as _audit

    return _audit(*args, **kwargs)
