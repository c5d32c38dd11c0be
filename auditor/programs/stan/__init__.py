"""Stan programs: grammar (``stan.lark``), parser, ``#include`` expansion, summary."""

from auditor.programs.stan.reader import read_stan, read_stan_text

__all__ = ["read_stan", "read_stan_text"]
