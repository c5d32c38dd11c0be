"""One vocabulary of sampler statistics, whatever sampler wrote them.

Rules read only the standard names listed in :mod:`auditor.model`: ``lp``,
``acceptance_rate``, ``step_size``, ``tree_depth``, ``n_steps``, ``diverging``
(bool), ``energy``, ``reached_max_treedepth`` (bool). Every other statistic is
passed through under its own name.

Sources of the sampler-side names:

- CmdStan CSV columns (``lp__``, ``accept_stat__``, ``stepsize__``, ``treedepth__``,
  ``n_leapfrog__``, ``divergent__``, ``energy__``): the CmdStan guide, "Stan CSV
  file format".
- PyMC's own NUTS (version 4 and later) already writes the standard names
  (``diverging``, ``tree_depth``, ``reached_max_treedepth``, ``energy``, ``lp``,
  ``step_size``, ``acceptance_rate``, ``n_steps``) plus extras; PyMC3 (version 3)
  wrote ``depth``, ``tree_size``, ``mean_tree_accept`` and ``model_logp``
  (PyMC3 "Sampler statistics" notebook; PyMC docs, ``pymc.step_methods.hmc.NUTS``).
- NumPyro through arviz-base's ``from_numpyro`` (arviz_base/io_numpyro.py,
  ``sample_stats_to_xarray``): ``lp``, ``step_size``, ``n_steps``,
  ``acceptance_rate``, ``diverging``, ``tree_depth`` and
  ``reached_max_tree_depth`` (with an underscore inside "tree_depth"), plus
  NumPyro's own extra fields under their own names (``energy``; ``mean_accept_prob``
  is a running mean, not a per-draw rate, so it keeps its name).
- nutpie: ``depth``, ``maxdepth_reached``, ``logp``, ``mean_tree_accept``,
  ``diverging``, ``energy``, ``step_size``, ``n_steps``, ``index_in_trajectory``
  (nutpie docs, "Understanding Sampler Statistics in Nutpie",
  https://pymc-devs.github.io/nutpie/sample-stats.html; nuts-rs ``SampleStats``
  trait on docs.rs).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import xarray as xr

#: The standard statistic names rules may rely on.
STANDARD: tuple[str, ...] = (
    "lp",
    "acceptance_rate",
    "step_size",
    "tree_depth",
    "n_steps",
    "diverging",
    "energy",
    "reached_max_treedepth",
)

#: CmdStan CSV sampler columns.
CMDSTAN: Mapping[str, str] = {
    "lp__": "lp",
    "accept_stat__": "acceptance_rate",
    "stepsize__": "step_size",
    "treedepth__": "tree_depth",
    "n_leapfrog__": "n_steps",
    "divergent__": "diverging",
    "energy__": "energy",
}

#: PyMC3 names (PyMC 4+ writes the standard names itself).
PYMC3: Mapping[str, str] = {
    "depth": "tree_depth",
    "tree_size": "n_steps",
    "mean_tree_accept": "acceptance_rate",
    "model_logp": "lp",
}

#: nutpie names.
NUTPIE: Mapping[str, str] = {
    "depth": "tree_depth",
    "maxdepth_reached": "reached_max_treedepth",
    "logp": "lp",
    "mean_tree_accept": "acceptance_rate",
}

#: NumPyro names through arviz-base (the others are already standard).
NUMPYRO: Mapping[str, str] = {
    "reached_max_tree_depth": "reached_max_treedepth",
}

#: All aliases, sampler name -> standard name. The dictionaries above agree where
#: they overlap (``depth``, ``mean_tree_accept``), so one merged map serves all.
ALIASES: Mapping[str, str] = {**CMDSTAN, **PYMC3, **NUTPIE, **NUMPYRO}

#: Statistics that are dropped: PyMC's ``divergences`` is a running count kept
#: beside the per-draw ``diverging`` flag; counting it would count divergences
#: many times over.
DROPPED: frozenset[str] = frozenset({"divergences"})

#: Statistics that must be boolean.
BOOLEAN: tuple[str, ...] = ("diverging", "reached_max_treedepth")


#: Columns of a draws table (one row per draw) read as sampler statistics: the
#: standard names, every alias above, and any name ending in ``__`` (CmdStan's
#: and cmdstanpy's bookkeeping). ``depth`` and ``logp`` are left out: as column
#: names they are as likely to be a model's own quantities.
TABLE_STATS: frozenset[str] = frozenset(STANDARD) | (frozenset(ALIASES) - {"depth", "logp"})


def is_table_stat(name: str) -> bool:
    """Whether a draws-table column holds a sampler statistic."""
    return name in TABLE_STATS or (name.endswith("__") and len(name) > 2)


def standard_name(name: str) -> str:
    """Standard name of sampler statistic ``name`` (itself when it has none)."""
    return ALIASES.get(name, name)


def to_bool(values: np.ndarray) -> np.ndarray:
    """Boolean flags from 0/1 numbers; missing values (NaN) count as ``False``."""
    arr = np.asarray(values)
    if arr.dtype == bool:
        return arr
    if np.issubdtype(arr.dtype, np.floating):
        return np.where(np.isnan(arr), False, arr != 0)
    return arr.astype(bool)


def normalize_sample_stats(ds: xr.Dataset, max_depth: int | None = None) -> xr.Dataset:
    """Rename sampler statistics to the standard names.

    Idempotent. Aliases are renamed unless the standard name is already present
    (then the alias is kept under its own name); :data:`DROPPED` statistics are
    removed; ``diverging`` and ``reached_max_treedepth`` are cast to bool.

    Parameters
    ----------
    ds
        A ``sample_stats``-like dataset.
    max_depth
        The sampler's maximum tree depth, when known: used to add
        ``reached_max_treedepth`` (``tree_depth >= max_depth``) when it is missing.

    Returns
    -------
    xarray.Dataset
        A new dataset; ``ds`` is not changed.
    """
    out = ds.drop_vars([v for v in ds.data_vars if v in DROPPED])
    renames = {}
    for name in out.data_vars:
        target = ALIASES.get(str(name))
        if target and target not in out.data_vars and target not in renames.values():
            renames[name] = target
    if renames:
        out = out.rename_vars(renames)
    for name in BOOLEAN:
        if name in out.data_vars and out[name].dtype != bool:
            out[name] = out[name].copy(data=to_bool(out[name].values))
    if (
        "reached_max_treedepth" not in out.data_vars
        and "tree_depth" in out.data_vars
        and max_depth is not None
    ):
        depth = out["tree_depth"]
        out["reached_max_treedepth"] = depth.copy(data=np.asarray(depth.values) >= max_depth)
    return out
