"""Write the four small CmdStan-format CSV chains of the unsafe test project.

Run once from this folder (``python make_fits.py``); the output is committed. The
draws are synthetic: chain 4 of ``beta`` is shifted (so R-hat flags it) and a
few transitions are marked divergent (so the divergence figure is drawn).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

HEADER = """# stan_version_major = 2
# stan_version_minor = 36
# stan_version_patch = 0
# model = unsafe_model
# method = sample (Default)
#   sample
#     num_samples = 200
#     num_warmup = 200
#     save_warmup = 0 (Default)
#     thin = 1 (Default)
#     adapt
#       engaged = 1 (Default)
#       delta = 0.8 (Default)
#     algorithm = hmc (Default)
#       hmc
#         engine = nuts (Default)
#           nuts
#             max_depth = 10 (Default)
#         metric = diag_e (Default)
# id = {chain}
# random
#   seed = 7
"""
COLUMNS = "lp__,accept_stat__,stepsize__,treedepth__,n_leapfrog__,divergent__,energy__,alpha,beta"


def main() -> None:
    rng = np.random.default_rng(20261202)
    for chain in range(1, 5):
        n = 200
        alpha = rng.normal(0.0, 1.0, n)
        beta = rng.normal(2.0 if chain == 4 else 0.0, 1.0, n)
        energy = rng.normal(5.0, 1.5, n)
        divergent = np.zeros(n, dtype=int)
        if chain == 2:
            divergent[[10, 50, 90]] = 1
        lines = [HEADER.format(chain=chain).rstrip("\n"), COLUMNS,
                 "# Adaptation terminated", "# Step size = 0.8",
                 "# Diagonal elements of inverse mass matrix:", "# 1, 1"]
        for i in range(n):
            lp = -0.5 * (alpha[i] ** 2 + beta[i] ** 2)
            lines.append(f"{lp:.6g},0.9,0.8,2,3,{divergent[i]},{energy[i]:.6g},"
                         f"{alpha[i]:.6g},{beta[i]:.6g}")
        Path(f"fits/javascript:alert(1)<img src=x>-{chain}.csv").write_text(
            "\n".join(lines) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
