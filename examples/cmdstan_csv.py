"""Write one pystan (3.x) chain as a CmdStan-format CSV file.

pystan talks to Stan through httpstan, which hands back, per chain, the same
messages CmdStan's CSV writer receives: the draws (with CmdStan's flat column
names), the adaptation block and the elapsed-time lines. This module lays them
out the way CmdStan does: the argument header, the column line, the adaptation
block, the draws and the timing footer.

The header follows the key layout of a real CmdStan 2.20 file (the
``arviz-stan-test-data-warmup`` chains in the shared reference data); the Stan
version is the one httpstan was built with.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

SAMPLER_COLUMNS = (
    "lp__",
    "accept_stat__",
    "stepsize__",
    "treedepth__",
    "n_leapfrog__",
    "divergent__",
    "energy__",
)
# CmdStan writes these as integers even though they travel as doubles.
INTEGER_SAMPLER_COLUMNS = {"treedepth__", "n_leapfrog__", "divergent__"}


@dataclass
class RunSettings:
    """Sampler arguments of one pystan run, as CmdStan would echo them."""

    num_samples: int = 1000
    num_warmup: int = 1000
    thin: int = 1
    delta: float = 0.8
    max_depth: int = 10
    seed: int = 1
    init: float = 2.0

    def pystan_kwargs(self) -> dict[str, Any]:
        """Keyword arguments for ``stan.Model.sample`` (everything but the seed)."""
        return {
            "num_samples": self.num_samples,
            "num_warmup": self.num_warmup,
            "num_thin": self.thin,
            "delta": self.delta,
            "max_depth": self.max_depth,
            "init_radius": self.init,
        }


def fmt(value: float) -> str:
    """Six significant digits, as CmdStan's default output precision (``%g``)."""
    return format(float(value), ".6g")


def _arg(name: str, value: Any, default: Any, indent: int) -> str:
    """One ``# name = value`` header line, marked ``(Default)`` when it is the default."""
    mark = " (Default)" if value == default else ""
    return "#" + " " * indent + f" {name} = {value}{mark}"


def header_lines(
    *,
    stan_version: tuple[int, int, int],
    model_name: str,
    chain_id: int,
    data_file: str,
    output_file: str,
    settings: RunSettings,
) -> list[str]:
    """The argument echo CmdStan writes at the top of a sample CSV."""
    s = settings
    major, minor, patch = stan_version
    return [
        f"# stan_version_major = {major}",
        f"# stan_version_minor = {minor}",
        f"# stan_version_patch = {patch}",
        f"# model = {model_name}",
        "# method = sample (Default)",
        "#   sample",
        _arg("num_samples", s.num_samples, 1000, 4),
        _arg("num_warmup", s.num_warmup, 1000, 4),
        _arg("save_warmup", 0, 0, 4),
        _arg("thin", s.thin, 1, 4),
        "#     adapt",
        _arg("engaged", 1, 1, 6),
        _arg("gamma", 0.05, 0.05, 6),
        _arg("delta", s.delta, 0.8, 6),
        _arg("kappa", 0.75, 0.75, 6),
        _arg("t0", 10, 10, 6),
        _arg("init_buffer", 75, 75, 6),
        _arg("term_buffer", 50, 50, 6),
        _arg("window", 25, 25, 6),
        "#     algorithm = hmc (Default)",
        "#       hmc",
        "#         engine = nuts (Default)",
        "#           nuts",
        _arg("max_depth", s.max_depth, 10, 12),
        "#         metric = diag_e (Default)",
        "#         metric_file =  (Default)",
        "#         stepsize = 1 (Default)",
        "#         stepsize_jitter = 0 (Default)",
        f"# id = {chain_id}",
        "# data",
        f"#   file = {data_file}",
        _arg("init", f"{s.init:g}", "2", 0),
        "# random",
        f"#   seed = {s.seed}",
        "# output",
        f"#   file = {output_file}",
        "#   diagnostic_file =  (Default)",
        "#   refresh = 100 (Default)",
    ]


def chain_messages(stan_output: bytes) -> tuple[list[str], list[dict[str, float]], list[str]]:
    """Split one chain's httpstan output into adaptation text, draws and timing text.

    Returns
    -------
    adaptation, draws, timing
        The text lines Stan wrote after warmup ("Adaptation terminated", step
        size, inverse metric), the draws in order (name -> value), and the
        elapsed-time lines.
    """
    adaptation: list[str] = []
    draws: list[dict[str, float]] = []
    timing: list[str] = []
    for line in stan_output.splitlines():
        if b'"topic":"sample"' not in line:
            continue
        # json (not orjson) because draws may hold NaN or Infinity.
        values = json.loads(line)["values"]
        if isinstance(values, dict):
            draws.append(values)
        elif values:
            text = str(values[0])
            (timing if draws else adaptation).append(text)
    return adaptation, draws, timing


def draws_matrix(fit: Any, columns: list[str], param_dims: dict[str, list[int]]) -> np.ndarray:
    """Draws of ``fit`` as an array (draw, chain, column) in CmdStan column order.

    pystan's ``fit[name]`` has shape ``(*dims, draws * chains)`` with chains
    interleaved (index ``draw * num_chains + chain``); multi-index variables are
    flattened column-major, which is CmdStan's ``name.i.j`` order.
    """
    n_chains = fit.num_chains
    blocks = []
    for name in SAMPLER_COLUMNS:
        blocks.append(np.asarray(fit[name]).reshape(1, -1))
    for name, dims in param_dims.items():
        arr = np.asarray(fit[name])
        block = arr.reshape((-1, arr.shape[-1]), order="F")
        assert block.shape[0] == int(np.prod(dims or [1])), (name, dims, arr.shape)
        blocks.append(block)
    flat = np.concatenate(blocks, axis=0)
    assert flat.shape[0] == len(columns), (flat.shape, len(columns))
    n_total = flat.shape[1]
    return flat.reshape(len(columns), n_total // n_chains, n_chains).transpose(1, 2, 0)


def write_chain(
    path: Path,
    *,
    header: list[str],
    columns: list[str],
    values: np.ndarray,
    adaptation: list[str],
    timing: list[str],
) -> None:
    """Write one chain: header, column line, adaptation block, draws, timing footer."""
    int_cols = [c in INTEGER_SAMPLER_COLUMNS for c in columns]
    lines = list(header)
    lines.append(",".join(columns))
    lines.extend("# " + text for text in adaptation)
    for row in values:
        lines.append(
            ",".join(
                str(int(v)) if is_int else fmt(v) for v, is_int in zip(row, int_cols, strict=True)
            )
        )
    lines.append("# ")
    lines.extend("# " + text for text in timing)
    lines.append("# ")
    path.write_text("\n".join(lines) + "\n")
