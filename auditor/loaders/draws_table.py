"""Draws tables: one row per draw, as CSV or Parquet.

The form R's ``posterior::as_draws_df``, cmdstanpy's ``draws_pd`` and many
hand-made exports take (README, "Draws tables"):

- a chain column: ``chain``, ``.chain`` (R's posterior) or ``chain__`` (cmdstanpy);
- a draw column: ``draw``, ``.iteration`` or ``.draw`` (R), ``iter__`` or ``draw__``
  (cmdstanpy); rows are ordered by it within each chain;
- one column per scalar quantity: ``mu``, ``theta[1]``, ``Sigma[2,1]``, or the
  dotted forms ``theta.1`` (CmdStan) and ``Sigma.2.1.`` (R's ``make.names``),
  reshaped into arrays (:mod:`auditor.loaders.stan_names`);
- sampler statistics under their usual names (``divergent__``, ``diverging``,
  ``treedepth__``, ``energy__``, ...; :data:`~auditor.loaders.stats_vocab.TABLE_STATS`).

CSV is read with polars (``NA`` is a missing value, ``TRUE``/``FALSE`` are 1/0);
Parquet with polars too. The file is read through the gate into memory and
closed at once; the rows a Parquet file declares are checked against the size
limit before its columns are decoded.
"""

from __future__ import annotations

import io
from collections import Counter
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from auditor.boundary import Boundary, Refused
from auditor.loaders import stan_names
from auditor.loaders.problems import Loaded, LoadProblem, refused_problem
from auditor.loaders.stats_vocab import is_table_stat, normalize_sample_stats, standard_name
from auditor.model import SamplerSettings

#: Chain and draw columns, in order of preference (a within-chain index first).
CHAIN_COLUMNS = ("chain", ".chain", "chain__")
DRAW_COLUMNS = ("draw", ".iteration", "iter__", ".draw", "draw__")
#: Columns of bookkeeping that are neither draws nor statistics.
_SKIPPED = frozenset({".chain", ".iteration", ".draw", "chain__", "iter__", "draw__",
                      "chain", "draw"})
#: Bytes of the first line read at most to learn a CSV's columns.
_HEAD_LIMIT = 16 * 1024 * 1024
_PARQUET_MAGIC = b"PAR1"


def table_columns(columns: Sequence[str]) -> tuple[str | None, str | None]:
    """The chain and draw columns among ``columns`` (``None`` when absent)."""
    chain = next((c for c in CHAIN_COLUMNS if c in columns), None)
    draw = next((c for c in DRAW_COLUMNS if c in columns), None)
    return chain, draw


def sniff_draws_table(path: Path, gate: Boundary | None = None) -> tuple[list[str] | None, str]:
    """The column names of a draws table, or ``(None, why it is not one)``.

    Cheap: a CSV's first line, a Parquet file's schema. A table is a draws table
    when it has a chain and a draw column.

    Raises
    ------
    Refused
        The boundary refused the file.
    """
    gate = gate or Boundary.unconfined()
    path = Path(path)
    if path.suffix.lower() == ".parquet":
        try:
            columns = _parquet_columns(_read_all(path, gate))
        except Refused:
            raise
        except Exception as exc:  # noqa: BLE001 - a damaged file: say why, never raise
            return None, f"not a readable Parquet file ({type(exc).__name__})"
    else:
        with gate.open(path, check_size=False) as fh:
            head = fh.readline(_HEAD_LIMIT)
        if not head.strip():
            return None, "an empty file"
        if b"\x00" in head[:4096]:
            return None, "a binary file"
        text = head.decode("utf-8", errors="replace").removeprefix("\ufeff").strip()
        if text.startswith("#"):
            return None, "a commented CSV, not a draws table"
        columns = [c.strip().strip('"') for c in text.split(",")]
    chain, draw = table_columns(columns)
    if chain is None or draw is None:
        return None, "no chain and draw columns (chain/draw, .chain/.iteration, chain__/draw__)"
    return columns, ""


def _read_all(path: Path, gate: Boundary) -> bytes:
    with gate.open(path) as fh:
        return fh.read()


def _parquet_columns(data: bytes) -> list[str]:
    import polars as pl

    if not data.startswith(_PARQUET_MAGIC):
        raise ValueError("no Parquet magic bytes")
    return list(pl.read_parquet_schema(io.BytesIO(data)))


def _frame(path: Path, data: bytes, gate: Boundary, problems: list[LoadProblem]):  # noqa: ANN202
    """The table as a polars DataFrame, or ``None`` with a problem."""
    import polars as pl

    if path.suffix.lower() == ".parquet":
        if not data.startswith(_PARQUET_MAGIC):
            problems.append(LoadProblem(path, "not a Parquet file (the first bytes do not match)"))
            return None
        lazy = pl.scan_parquet(io.BytesIO(data))
        n_rows = lazy.select(pl.len()).collect().item()
        n_cols = len(lazy.collect_schema())
        declared = n_rows * n_cols * 8
        if gate.max_bytes is not None and declared > gate.max_bytes:
            problems.append(LoadProblem(
                path, f"the file declares {n_rows:,} rows of {n_cols:,} columns "
                f"({declared / 1e6:,.0f} MB as numbers), more than the limit of "
                f"{gate.max_bytes / 1e6:,.0f} MB for one input; it was not loaded",
                kind="too-large"))
            return None
        return lazy.collect()
    if b"\x00" in data[:4096]:
        problems.append(LoadProblem(path, "a binary file, not a draws table"))
        return None
    return pl.read_csv(data, null_values=["NA"], infer_schema_length=10_000,
                       encoding="utf8-lossy", truncate_ragged_lines=False)


def _numeric(df, path: Path, problems: list[LoadProblem]):  # noqa: ANN001, ANN202
    """Every column as float64 (booleans 1/0); text that is not a number is NaN and
    reported with its line (CSV: header on line 1)."""
    import polars as pl

    out = {}
    for name in df.columns:
        s = df[name]
        if s.dtype == pl.Boolean:
            s = s.cast(pl.Float64)
        elif s.dtype.is_numeric():
            s = s.cast(pl.Float64)
        else:
            text = s.cast(pl.String, strict=False)
            s = text.cast(pl.Float64, strict=False)
            lowered = text.str.to_lowercase()
            s = pl.select(pl.when(lowered == "true").then(1.0).when(lowered == "false").then(0.0)
                          .otherwise(s)).to_series()
            bad = (s.is_null() & text.is_not_null()).arg_true()
            if bad.len():
                first = int(bad[0])
                problems.append(LoadProblem(
                    path, f"column {name!r}: {bad.len()} values are not numbers (the first is "
                    f"{str(text[first])[:40]!r}); read as missing (NaN)",
                    line=first + 2 if path.suffix.lower() == ".csv" else None))
        missing = s.null_count()
        if missing:
            problems.append(LoadProblem(
                path, f"column {name!r}: {missing} values are missing (NA or empty); read as "
                "NaN", kind="note"))
        out[name] = s.fill_null(float("nan")).to_numpy()
    return out


def load_draws_table(paths: Sequence[Path], gate: Boundary | None = None) -> Loaded:
    """Load draws tables (CSV or Parquet) whose rows together are one run's draws.

    Returns
    -------
    Loaded
        ``posterior`` (quantities), ``sample_stats`` (recognized statistics under
        standard names). Chains with fewer draws than the others are left out
        with an ``inconsistent-chains`` problem.
    """
    gate = gate or Boundary.unconfined()
    problems: list[LoadProblem] = []
    frames: list[tuple[Path, dict[str, np.ndarray]]] = []
    for p in map(Path, paths):
        try:
            data = _read_all(p, gate)
        except Refused as exc:
            problems.append(refused_problem(p, exc))
            continue
        except OSError as exc:
            problems.append(LoadProblem(p, f"cannot read the file: {exc.strerror or exc}"))
            continue
        if not data.strip():
            problems.append(LoadProblem(p, "an empty file (0 bytes), not a draws table"))
            continue
        try:
            df = _frame(p, data, gate, problems)
        except Exception as exc:  # noqa: BLE001 - readers raise many types; report, never crash
            problems.append(LoadProblem(
                p, f"the file could not be read as a draws table: {type(exc).__name__}: "
                f"{str(exc)[:300]}"))
            continue
        del data
        if df is None:
            continue
        chain_col, draw_col = table_columns(df.columns)
        if chain_col is None:
            problems.append(LoadProblem(
                p, "a draws table needs a chain column (chain, .chain or chain__) and a draw "
                f"column (draw, .iteration, .draw, iter__ or draw__); columns found: "
                f"{', '.join(df.columns[:8])}", line=1 if p.suffix.lower() == ".csv" else None))
            continue
        dupes = [c for c, k in Counter(df.columns).items() if k > 1]
        if dupes:
            problems.append(LoadProblem(p, f"column names repeat ({', '.join(dupes[:5])})",
                                        line=1))
            continue
        if draw_col is None:
            problems.append(LoadProblem(
                p, "no draw column (draw, .iteration, .draw, iter__ or draw__): draws are taken "
                "in file order within each chain", kind="note"))
        frames.append((p, _numeric(df, p, problems)))
    if not frames:
        return Loaded(tree=None, problems=problems)
    return _assemble(frames, problems)


def _assemble(frames: list[tuple[Path, dict[str, np.ndarray]]],
              problems: list[LoadProblem]) -> Loaded:
    first_path, first = frames[0]
    names = list(first)
    for p, cols in frames[1:]:
        if list(cols) != names:
            problems.append(LoadProblem(
                p, f"its columns differ from those of {first_path.name}; the file is left out",
                kind="inconsistent-chains"))
    frames = [(p, c) for p, c in frames if list(c) == names]
    chain_col, draw_col = table_columns(names)
    chains: dict[float, list[tuple[Path, np.ndarray]]] = {}
    for p, cols in frames:
        chain_ids = cols[chain_col]
        order = np.lexsort((cols[draw_col], chain_ids)) if draw_col else np.argsort(
            chain_ids, kind="stable")
        for cid in np.unique(chain_ids[np.isfinite(chain_ids)]):
            rows = order[chain_ids[order] == cid]
            chains.setdefault(float(cid), []).append((p, rows))
    bad_ids = [p for p, cols in frames if not np.isfinite(cols[chain_col]).all()]
    for p in bad_ids:
        problems.append(LoadProblem(p, f"some rows have no chain number ({chain_col}); they are "
                                    "left out"))
    for cid, parts in chains.items():
        if len(parts) > 1:
            problems.append(LoadProblem(
                parts[1][0], f"chain {cid:g} appears in {parts[0][0].name} too; its rows here "
                "are left out", kind="inconsistent-chains"))
            del parts[1:]
    lengths = Counter(len(parts[0][1]) for parts in chains.values())
    if not lengths:
        problems.append(LoadProblem(first_path, "the table has no rows of draws"))
        return Loaded(tree=None, problems=problems)
    n_draws = lengths.most_common(1)[0][0]
    kept = {}
    for cid, parts in sorted(chains.items()):
        p, rows = parts[0]
        if len(rows) != n_draws:
            problems.append(LoadProblem(
                p, f"chain {cid:g} has {len(rows)} draws where the other chains have "
                f"{n_draws}; this chain is left out", kind="inconsistent-chains"))
            continue
        kept[cid] = (p, rows)
    by_path = dict(frames)
    quantity_cols = [n for n in names if n not in _SKIPPED and not is_table_stat(n)]
    stat_cols = [n for n in names if n not in _SKIPPED and is_table_stat(n)]

    def stacked(column: str) -> np.ndarray:
        return np.stack([by_path[p][column][rows] for p, rows in kept.values()])

    values = np.stack([stacked(c) for c in quantity_cols], axis=-1) if quantity_cols else None
    layout = stan_names.layout(list(enumerate(quantity_cols)), first_path, 1, problems,
                               table=True)
    n_chains = len(kept)
    coords: dict[str, object] = {"chain": np.arange(n_chains), "draw": np.arange(n_draws)}
    variables = {}
    if values is not None:
        for name, spec in layout.items():
            arr = stan_names.extract(values, spec)
            dims = ("chain", "draw") if isinstance(spec, int) else (
                "chain", "draw", *spec.dims(name))
            variables[name] = xr.Variable(dims, np.ascontiguousarray(arr))
            # The indices as the column names write them (from 1), so that a
            # quantity is labelled theta[1] as its column says.
            for dim, coord in stan_names.coords_for(name, spec, start=1).items():
                coords.setdefault(dim, coord)
    attrs = {"source_format": "draws-table"}
    groups = {"posterior": xr.Dataset(variables, coords=coords, attrs=attrs)}
    if stat_cols:
        # CmdStan's own statistic names keep their "__" for the vocabulary to map.
        stats = xr.Dataset({(c[:-2] if c.endswith("__") and c not in _CMDSTAN_STATS else c):
                            (("chain", "draw"), _typed(c, stacked(c))) for c in stat_cols},
                           coords={"chain": coords["chain"], "draw": coords["draw"]}, attrs=attrs)
        groups["sample_stats"] = normalize_sample_stats(stats)
    tree = xr.DataTree.from_dict(groups)
    tree.attrs.update(attrs)
    ids = [int(c) for c in kept if float(c).is_integer()]
    settings = SamplerSettings(
        method="sample" if stat_cols else None,
        num_samples=n_draws,
        chain_ids=ids if len(ids) == n_chains else list(range(1, n_chains + 1)),
    )
    return Loaded(tree=tree, settings=settings, sources=[p for p, _ in frames], problems=problems)


_CMDSTAN_STATS = frozenset({"lp__", "accept_stat__", "stepsize__", "treedepth__", "n_leapfrog__",
                            "divergent__", "energy__"})


def _typed(name: str, values: np.ndarray) -> np.ndarray:
    """Tree depths and step counts as integers when every value is a whole number."""
    if standard_name(name) not in ("tree_depth", "n_steps"):
        return values
    if values.size and np.isfinite(values).all() and (values == np.round(values)).all():
        return values.astype(np.int64)
    return values
