"""The normalized model of a project under audit.

Loaders at the edge turn each input format into :class:`Analysis` objects; rules
read only these. Nothing here knows which file format or sampler the data came
from.

Standard groups of ``Analysis.tree`` (arviz's InferenceData names): ``posterior``,
``sample_stats``, ``warmup_posterior``, ``warmup_sample_stats``, ``log_likelihood``,
``log_prior``, ``prior``, ``prior_predictive``, ``posterior_predictive``,
``observed_data``, ``constant_data``. Every draws group has dimensions
``(chain, draw, ...)``.

Standard sampler statistics (``sample_stats``), whatever sampler wrote them:
``lp``, ``acceptance_rate``, ``step_size``, ``tree_depth``, ``n_steps``,
``diverging`` (bool), ``energy``, ``reached_max_treedepth`` (bool); see
:mod:`auditor.loaders.stats_vocab`.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import xarray as xr

from auditor.boundary import display
from auditor.findings import Finding
from auditor.predictive import Pairing
from auditor.programs.summary import ProgramSummary


@dataclass
class SamplerSettings:
    """How the draws were made, as far as the files say.

    ``None`` means the files do not say. ``chain_ids`` and ``seeds`` follow the
    chain order of the draws.
    """

    library: str | None = None
    library_version: str | None = None
    method: str | None = None
    algorithm: str | None = None
    engine: str | None = None
    num_samples: int | None = None
    num_warmup: int | None = None
    save_warmup: bool | None = None
    thin: int | None = None
    adapt_engaged: bool | None = None
    adapt_delta: float | None = None
    max_depth: int | None = None
    metric: str | None = None
    chain_ids: list[int] = field(default_factory=list)
    seeds: list[int] = field(default_factory=list)
    model_name: str | None = None
    # --- Issue 13 (readers): the CmdStan adaptation block and timing footer, one
    # entry per chain in chain order ([] when the files do not say).
    #: Step size at the end of adaptation.
    adapted_step_size: list[float] = field(default_factory=list)
    #: Form of the adapted inverse metric: ``"diag"`` or ``"dense"``.
    inverse_metric: str | None = None
    #: Diagonal of each chain's adapted inverse metric (all of a diagonal metric).
    inverse_metric_diagonal: list[list[float]] = field(default_factory=list)
    #: Seconds of warmup and of sampling (NaN for a chain that does not say).
    warmup_seconds: list[float] = field(default_factory=list)
    sampling_seconds: list[float] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe view with ``None`` values kept (they mean "not stated")."""
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


@dataclass
class InputProblem:
    """A problem with an input file, seen while finding or loading it.

    ``kind`` is ``unreadable`` (the file could not be used),
    ``inconsistent-chains`` (chains of one run disagree), ``unpaired`` (a model
    program without draws, or draws without their program), ``outside-project``
    (a path leading out of the project, not read), ``special-file`` (a FIFO,
    socket, device or link loop, never opened), ``too-large`` (over the size
    limit, not read) or ``note`` (worth knowing; nothing was lost).
    """

    kind: str
    path: Path
    message: str
    line: int | None = None


@dataclass
class AnalysisSpec:
    """An analysis as declared in the configuration or found by discovery.

    Paths are absolute. ``observed`` names the observed data variable;
    ``plausible_range`` is the analyst's declared range of the outcome.
    """

    name: str
    draws: list[Path]
    model: Path | None = None
    data: Path | None = None
    observed: str | None = None
    plausible_range: tuple[float, float] | None = None
    declared: bool = False
    prior_draws: list[Path] = field(default_factory=list)
    #: Configured names of the pointwise log-likelihood and the replicated draws
    #: (``None``: not configured; see :mod:`auditor.predictive`).
    log_lik: str | None = None
    predictive: str | None = None
    #: Problems seen while reading the declaration (paths refused by the boundary).
    problems: list[InputProblem] = field(default_factory=list)
    #: Marked ``chosen = true`` in the configuration: the model the analyst reports.
    chosen: bool = False
    #: Draws already in memory (a DataTree handed to the Python API) instead of files.
    tree: Any = None
    #: Name of a drawn variable holding the log-prior per draw (``log_prior``).
    log_prior: str | None = None
    #: Simulation-based calibration ranks (a CSV) and, when the file has no column
    #: for it, the number of posterior draws per simulation.
    sbc_ranks: Path | None = None
    sbc_draws: int | None = None


@dataclass
class Analysis:
    """One fitted analysis, normalized.

    Parameters
    ----------
    name
        Analysis name (from the manifest, or derived from the files).
    tree
        Draws and everything else as a DataTree with standard group names.
    settings
        Sampler settings.
    sources
        Absolute paths of the draws files, in chain order.
    spec
        The declaration or discovery record it came from.
    program
        What the model program says, when one was found and read.
    data
        Observed and constant data read from the data file, when there is one.
    problems
        Problems seen while finding and loading its files; the ``inputs.*``
        rules turn them into findings.
    pairings
        Each observed variable with its replicated draws and pointwise
        log-likelihood, and how they were found (:mod:`auditor.predictive`).
    """

    name: str
    tree: xr.DataTree | None
    settings: SamplerSettings = field(default_factory=SamplerSettings)
    sources: list[Path] = field(default_factory=list)
    spec: AnalysisSpec | None = None
    program: ProgramSummary | None = None
    data: dict[str, Any] = field(default_factory=dict)
    problems: list[InputProblem] = field(default_factory=list)
    pairings: list[Pairing] = field(default_factory=list)
    #: Simulation-based calibration ranks read for this analysis (``SbcRanks``), if any.
    sbc: Any = None
    #: Draws read lazily (Dask arrays, see :mod:`auditor.loaders.lazy`): the most bytes a
    #: computation may load whole from them; ``None`` when everything is in memory.
    whole_limit: int | None = None
    #: What to undo once the analysis is audited (temporary stores of converted draws).
    cleanup: list[Callable[[], None]] = field(default_factory=list, repr=False)

    def release(self) -> None:
        """Drop the draws and run the cleanup actions (each once; errors are ignored:
        a temporary folder that is already gone is no concern of the audit)."""
        self.tree = None
        while self.cleanup:
            action = self.cleanup.pop()
            try:
                action()
            except OSError:
                pass

    def group(self, name: str) -> xr.Dataset | None:
        """Dataset of group ``name``, or ``None`` when absent or empty."""
        if self.tree is None or name not in self.tree.children:
            return None
        ds = self.tree[name].to_dataset()
        return ds if ds.data_vars else None

    @property
    def n_chains(self) -> int:
        """Number of chains of the posterior (0 without a posterior or stats)."""
        for g in ("posterior", "sample_stats"):
            ds = self.group(g)
            if ds is not None and "chain" in ds.sizes:
                return int(ds.sizes["chain"])
        return 0

    @property
    def n_draws(self) -> int:
        """Kept draws per chain (0 without a posterior or stats)."""
        for g in ("posterior", "sample_stats"):
            ds = self.group(g)
            if ds is not None and "draw" in ds.sizes:
                return int(ds.sizes["draw"])
        return 0


@dataclass
class Project:
    """The project under audit: its root and its analyses.

    ``findings`` holds project-level findings (configuration); ``problems`` the
    input problems found outside any analysis (discovery: links leading out,
    FIFOs, files that are not draws beside a run).
    """

    root: Path
    analyses: list[Analysis] = field(default_factory=list)
    findings: list[Finding] = field(default_factory=list)
    problems: list[InputProblem] = field(default_factory=list)

    def relpath(self, path: Path | str) -> str:
        """``path`` relative to the project root with ``/`` separators, printable.

        The path is taken as written (links are not resolved, so a link that
        leads out is named by its own place). Paths outside the root are given
        absolute; bytes that are not UTF-8 become ``\\xNN`` escapes.
        """
        p = Path(os.path.abspath(path))
        root = Path(os.path.abspath(self.root))
        try:
            text = p.relative_to(root).as_posix()
        except ValueError:
            real_root = Path(os.path.realpath(self.root))
            try:
                text = p.relative_to(real_root).as_posix()
            except ValueError:
                text = p.as_posix()
        return display(text)
