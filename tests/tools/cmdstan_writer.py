"""Write small CmdStan-format CSV files for rule cases and tests.

The header copies the layout real CmdStan 2.x writes (see the files in
../shared/reference-data/cmdstan-outputs/); the draws are whatever the caller
gives, so each case states in its generator how its pathology was made.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

HEADER = """# stan_version_major = 2
# stan_version_minor = 36
# stan_version_patch = 0
# model = {model}
# method = sample (Default)
#   sample
#     num_samples = {num_samples}
#     num_warmup = {num_warmup}
#     save_warmup = 0 (Default)
#     thin = 1 (Default)
#     adapt
#       engaged = 1 (Default)
#       gamma = 0.05 (Default)
#       delta = {delta}
#       kappa = 0.75 (Default)
#       t0 = 10 (Default)
#       init_buffer = 75 (Default)
#       term_buffer = 50 (Default)
#       window = 25 (Default)
#     algorithm = hmc (Default)
#       hmc
#         engine = nuts (Default)
#           nuts
#             max_depth = {max_depth}
#         metric = diag_e (Default)
#         metric_file =  (Default)
#         stepsize = 1 (Default)
#         stepsize_jitter = 0 (Default)
# id = {chain_id}
# data
#   file = data.json
# init = 2 (Default)
# random
#   seed = {seed}
# output
#   file = {filename}
"""

SAMPLER_COLUMNS = ("lp__", "accept_stat__", "stepsize__", "treedepth__", "n_leapfrog__",
                   "divergent__", "energy__")


def write_run(folder: Path, stem: str, model: str, params: dict[str, np.ndarray],
              stats: dict[str, np.ndarray], max_depth: int = 10, delta: float = 0.8,
              seed: int = 1, num_warmup: int = 1000) -> list[Path]:
    """Write one CSV per chain; arrays are (chain, draw) or (chain, draw, k).

    ``stats`` holds any of :data:`SAMPLER_COLUMNS` without the trailing ``__``.
    """
    folder.mkdir(parents=True, exist_ok=True)
    first = next(iter(params.values()))
    chains, draws = first.shape[:2]
    columns: list[str] = [c for c in SAMPLER_COLUMNS if c[:-2] in stats]
    series: list[np.ndarray] = [stats[c[:-2]] for c in columns]
    for name, arr in params.items():
        if arr.ndim == 2:
            columns.append(name)
            series.append(arr)
        else:
            for k in range(arr.shape[2]):
                columns.append(f"{name}.{k + 1}")
                series.append(arr[:, :, k])
    paths = []
    for c in range(chains):
        path = folder / f"{stem}-{c + 1}.csv"
        head = HEADER.format(model=model, num_samples=draws, num_warmup=num_warmup,
                             delta=delta, max_depth=max_depth, chain_id=c + 1,
                             seed=seed, filename=path.name)
        rows = [",".join(f"{s[c, d]:.6g}" for s in series) for d in range(draws)]
        body = "\n".join(rows)
        path.write_text(
            head + ",".join(columns) + "\n# Adaptation terminated\n# Step size = 0.5\n"
            "# Diagonal elements of inverse mass matrix:\n# 1\n" + body
            + "\n# \n#  Elapsed Time: 0.01 seconds (Warm-up)\n#                0.01 seconds "
            "(Sampling)\n#                0.02 seconds (Total)\n# \n"
        )
        paths.append(path)
    return paths
