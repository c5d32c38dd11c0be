"""What a lab or a journal adopts around the audit: policies, accepted findings, baselines.

- :mod:`auditor.gate.policy`: named sets of rule settings (built-in ``everyday`` and
  ``submission``, or a lab's own file extending one of them);
- :mod:`auditor.gate.accepted`: findings a project accepts, each with a reason, who
  accepted it and an optional expiry date;
- :mod:`auditor.gate.baseline`: each finding marked new, unchanged or gone against an
  earlier JSON report.

They read configuration and results only; the exit status is still decided in
:mod:`auditor.result`.
"""
