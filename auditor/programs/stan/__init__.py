"""Stan programs: grammar, parser, ``#include`` expansion and program summary.

Modules
-------
``stan.lark``
    The grammar (LALR(1), lark's contextual lexer), written from the Stan
    Reference Manual.
``includes``
    Text-level ``#include`` expansion with a map from every expanded line back to
    the file and line it came from.
``parser``
    :func:`parse_stan`: text to a lark tree with line and column on every node;
    syntax errors as :class:`StanSyntaxError` in plain words.
``summarize``
    Tree to :class:`~auditor.programs.summary.ProgramSummary`: declarations,
    priors, likelihoods, location/scale roles.
``reader``
    :func:`read_stan`: a file to a summary, never raising on bad input.

Most callers want :func:`auditor.programs.read.read_program`.
"""

from auditor.programs.stan.reader import read_stan, read_stan_text

__all__ = ["read_stan", "read_stan_text"]
