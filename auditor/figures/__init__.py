"""Figures for the reports: deterministic matplotlib -> SVG helpers and figure makers.

Matplotlib is imported only inside the functions that draw (it is heavy and an
optional dependency: the ``report`` extra). Every figure is a
:class:`~auditor.result.Figure` holding a complete SVG document; the same draws
always give the same SVG bytes (fixed hash salt, no date, fixed size).

Modules
-------
render
    Figure creation in our house style and the SVG export.
draws
    Finding a quantity's draws (``theta[2]``) in a posterior dataset.
sampling
    Figures of the sampling stage: trace and rank plots, divergent transitions in
    the best-separating pair, the energy distribution with E-BFMI per chain.
inline
    Making an SVG safe and unique for placing inline in an HTML page.
"""
