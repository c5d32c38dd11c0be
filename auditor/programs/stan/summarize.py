"""Turn a Stan syntax tree into a language-neutral :class:`ProgramSummary`.

What counts as what follows the Stan Reference Manual: variables declared at the
top of a block belong to that block ("Program Blocks"); ``y ~ f(theta)`` and
``target += f_lpdf(y | theta)`` add the same log density up to a constant
("Sampling statements" / "Log probability increment"); the left-hand side decides
whether a statement is a prior (a parameter) or a likelihood (data).
"""

from __future__ import annotations

import re

from lark import Token, Tree

from auditor.programs.stan.includes import ExpandedSource
from auditor.programs.summary import (
    LOCATION_SCALE_ARGS,
    Arg,
    Bound,
    Declaration,
    Distribution,
    Likelihood,
    ProgramSummary,
    SyntaxProblem,
)

BLOCK_NAMES = {
    "functions_block": "functions",
    "data_block": "data",
    "tdata_block": "transformed data",
    "params_block": "parameters",
    "tparams_block": "transformed parameters",
    "model_block": "model",
    "gq_block": "generated quantities",
}
BLOCK_ORDER = list(BLOCK_NAMES.values())
DATA_BLOCKS = {"data", "transformed data"}
PARAMETER_BLOCKS = {"parameters", "transformed parameters"}

#: Suffixes of log density / mass functions (Reference Manual, "Probability functions").
DENSITY_SUFFIXES = ("_lpdf", "_lpmf", "_lupdf", "_lupmf")
#: Log cumulative distribution functions, used for censored data.
CDF_SUFFIXES = ("_lcdf", "_lccdf")

_SPACES = re.compile(r"\s+")


class _Builder:
    def __init__(self, source: ExpandedSource, summary: ProgramSummary) -> None:
        self.src = source
        self.summary = summary
        self.main_path = summary.path
        #: name -> names its assignments/initialisers refer to (locals, transformed).
        self.assigned: dict[str, list[str]] = {}
        #: (statement tree, kind) collected in order; resolved once all declarations are known.
        self.statements: list[tuple[Tree, str]] = []
        self.block_name = ""
        #: `_lp` function name -> (argument names, its ~ / target += statements).
        self.lp_functions: dict[str, tuple[list[str], list[tuple[Tree, str]]]] = {}
        self.lp_calls: list[Tree] = []
        self.definition_count: dict[str, int] = {}

    # ------------------------------------------------------------ positions & text
    def position(self, node: Tree | Token) -> tuple[str, int, int]:
        """(path or '' for the main file, line, column) in the file the user wrote."""
        if isinstance(node, Token):
            line, column = node.line or 1, node.column or 1
        else:
            line, column = node.meta.line, node.meta.column
        path, own_line = self.src.origin(line)
        return ("" if path == self.main_path else path), own_line, column

    def text(self, node: Tree | Token | None) -> str:
        if node is None:
            return ""
        if isinstance(node, Token):
            return str(node.value)
        if getattr(node.meta, "empty", True):
            return ""
        raw = self.src.text[node.meta.start_pos:node.meta.end_pos]
        return _SPACES.sub(" ", raw).strip()

    # ------------------------------------------------------------ program
    def build(self, tree: Tree) -> None:
        seen: dict[str, int] = {}
        for block in tree.children:
            if not isinstance(block, Tree):
                continue
            name = BLOCK_NAMES[block.data]
            self.check_block_order(block, name, seen)
            if name == "functions":
                self.collect_lp_functions(block)
                continue
            self.block_name = name
            for item in block.children:
                # Model-block declarations are local variables (Reference Manual,
                # "Program block: model"), not variables of the program.
                if isinstance(item, Tree) and item.data == "var_decl" and name != "model":
                    self.declare(item, name)
                elif isinstance(item, Tree):
                    self.walk_statement(item)
        self.resolve_statements()
        self.link_hierarchy()

    def collect_lp_functions(self, block: Tree) -> None:
        # A `_lp` function may hold the priors (Reference Manual, "Log probability
        # access in functions"); its statements count where the function is called.
        for fundef in block.children:
            _, name_tok, fun_args, body = fundef.children
            if not str(name_tok).endswith("_lp") or body.data != "fun_block":
                continue
            params = [str(arg.children[2]) for arg in fun_args.children] if fun_args else []
            statements: list[tuple[Tree, str]] = []
            _collect_density_statements(body, statements)
            self.lp_functions[str(name_tok)] = (params, statements)

    def check_block_order(self, block: Tree, name: str, seen: dict[str, int]) -> None:
        # Reference Manual, "Program block order": each block at most once, in this order.
        rank = BLOCK_ORDER.index(name)
        later = [b for b, r in seen.items() if r > rank]
        if name in seen:
            self.problem(block, f"the '{name}' block appears more than once")
        elif later:
            self.problem(block, f"the '{name}' block must come before the '{later[0]}' block")
        seen[name] = rank

    def problem(self, node: Tree | Token, message: str) -> None:
        path, line, column = self.position(node)
        self.summary.syntax_errors.append(
            SyntaxProblem(message, line, column, path or self.main_path))

    # ------------------------------------------------------------ declarations
    def declare(self, decl: Tree, block: str) -> None:
        type_node, *items = decl.children
        for item in items:
            self.declare_one(decl, type_node, item, block)

    def declare_one(self, decl: Tree, type_node: Tree, item: Tree, block: str) -> None:
        name_tok, old_dims, init = item.children
        name = str(name_tok)
        d = Declaration(name=name, block=block)
        d.path, d.line, d.column = self.position(decl)
        dims: list[str] = []
        if old_dims is not None:
            dims.extend(self.text(e) for e in old_dims.children[0].children)
        self.describe_type(type_node, d, dims)
        d.dims = tuple(dims)
        if name in self.summary.declarations:
            self.problem(name_tok, f"'{name}' is declared more than once")
        else:
            self.summary.declarations[name] = d
        if init is not None:
            if block in {"data", "parameters"}:
                # Reference Manual, "Program blocks": data come from the data file
                # and parameters from the sampler; neither block assigns values.
                self.problem(name_tok, f"'{name}' cannot be given a value in the "
                                       f"'{block}' block")
            self.assigned.setdefault(name, []).extend(names_in(init))
            self.define(name, init, plain=True)

    def define(self, name: str, expr: Tree, plain: bool) -> None:
        """Note ``name``'s defining expression; a second definition cancels it."""
        self.definition_count[name] = self.definition_count.get(name, 0) + 1
        if plain and self.definition_count[name] == 1:
            self.summary.definitions[name] = self.text(expr)
        else:
            self.summary.definitions.pop(name, None)

    def describe_type(self, node: Tree, d: Declaration, dims: list[str]) -> None:
        if node.data == "decl_type":
            node = node.children[0]
        if node.data == "array_type":
            _, sizes, inner = node.children
            dims.extend(self.text(e) for e in sizes.children)
            self.describe_type(inner, d, dims)
        elif node.data == "tuple_type":
            d.type = "tuple"
        elif node.data == "basic_type":
            type_name, constraints, sizes = node.children
            d.type = str(type_name.children[0])
            if sizes is not None:
                dims.extend(self.text(e) for e in sizes.children[0].children)
            if constraints is not None:
                for constraint in constraints.children:
                    key, expr = constraint.children
                    text = self.text(expr)
                    if key == "lower":
                        d.lower = Bound(text, literal_value(expr))
                    elif key == "upper":
                        d.upper = Bound(text, literal_value(expr))
                    elif key == "offset":
                        d.offset = text
                    else:
                        d.multiplier = text

    # ------------------------------------------------------------ statements
    def walk_statement(self, node: Tree) -> None:
        kind = node.data
        if kind == "var_decl":
            # A local variable: remember what its initial value refers to.
            for item in node.children[1:]:
                name_tok, _, init = item.children
                if init is not None:
                    self.assigned.setdefault(str(name_tok), []).extend(names_in(init))
                    self.define(str(name_tok), init, plain=True)
            return
        if kind == "assign":
            lhs, op, rhs = node.children
            targets = lvalue_roots(lhs)
            if not targets:
                self.problem(node, "the left side of an assignment must be a variable, "
                                   "optionally indexed (like x or x[i, j])")
                return
            for target in targets:
                self.assigned.setdefault(target, []).extend(names_in(rhs))
                # An unpacked tuple `(a, b) = f();` gives neither a definition of its own.
                self.define(target, rhs, plain=len(targets) == 1
                            and str(op.children[0]) in {"=", "<-"})
            return
        if kind == "expr_stmt":
            expr = node.children[0]
            if isinstance(expr, Tree) and expr.data == "call" and str(expr.children[0]) in (
                    self.lp_functions):
                self.lp_calls.append(expr)
            if not (isinstance(expr, Tree) and expr.data in {"call", "cond_call"}):
                self.problem(node, "an expression on its own is not a statement; only a "
                                   "function call can stand alone (did you mean '=' or '~'?)")
            return
        if kind in {"tilde", "target_pe"}:
            if self.block_name != "model":
                # Reference Manual, "Program blocks": only the model block (and
                # functions ending in _lp) may change the log density.
                what = "a distribution statement (~)" if kind == "tilde" else "'target +='"
                self.problem(node, f"{what} is only allowed in the model block, "
                                   f"not in '{self.block_name}'")
            self.statements.append((node, kind))
            return
        for child in node.children:
            if isinstance(child, Tree) and child.data not in _EXPRESSION_NODES:
                self.walk_statement(child)

    def resolve_statements(self) -> None:
        for node, kind in self.statements:
            self.resolve(node, kind, None)
        for call in self.lp_calls:
            params, statements = self.lp_functions[str(call.children[0])]
            args = call.children[1].children if call.children[1] is not None else []
            mapping = dict(zip(params, args, strict=False))
            for node, kind in statements:
                self.resolve(node, kind, mapping)

    def resolve(self, node: Tree, kind: str, mapping: dict[str, Tree] | None) -> None:
        """Record one ``~`` or ``target +=`` statement.

        ``mapping`` is None for program statements; inside a ``_lp`` function it maps
        the function's argument names to the expressions of the call.
        """
        if kind == "tilde":
            lhs, family_tok, args, truncation = node.children
            dist = self.distribution(
                node, str(family_tok), args.children if args is not None else [], mapping)
            if truncation is not None:
                low, high = truncation.children
                dist.truncation = (self.text(low) or None, self.text(high) or None)
            self.attach_mapped(lhs, dist, True, mapping)
            return
        for call in density_calls(node.children[0]):
            fname = str(call.children[0])
            if call.data == "cond_call":
                lhs = call.children[1]
                rest = call.children[2].children if call.children[2] is not None else []
            else:
                args = call.children[1].children if call.children[1] is not None else []
                if not args:
                    continue
                lhs, rest = args[0], args[1:]
            density = fname.endswith(DENSITY_SUFFIXES)
            family = strip_suffix(fname) if density else fname
            dist = self.distribution(call, family, rest, mapping)
            self.attach_mapped(lhs, dist, density, mapping)

    def attach_mapped(self, lhs: Tree, dist: Distribution, density: bool,
                      mapping: dict[str, Tree] | None) -> None:
        if mapping is None:
            self.attach(lhs, dist, density)
            return
        # Inside a function only its arguments reach program variables.
        root = root_name(lhs)
        if root in mapping:
            self.attach(mapping[root], dist, density)

    def distribution(self, node: Tree, family: str, args: list,
                     mapping: dict[str, Tree] | None = None) -> Distribution:
        path, line, column = self.position(node)
        return Distribution(
            family=family,
            args=[self.argument(a, mapping) for a in args],
            line=line,
            column=column,
            text=self.text(node),
            path=path,
        )

    def argument(self, node: Tree, mapping: dict[str, Tree] | None) -> Arg:
        if mapping is None:
            return Arg(self.text(node), literal_value(node), tuple(names_in(node)))
        if isinstance(node, Tree) and node.data == "var" and str(node.children[0]) in mapping:
            given = mapping[str(node.children[0])]
            return Arg(self.text(given), literal_value(given), tuple(names_in(given)))
        names = [m for n in names_in(node) if n in mapping for m in names_in(mapping[n])]
        return Arg(self.text(node), literal_value(node), tuple(dict.fromkeys(names)))

    def attach(self, lhs: Tree, dist: Distribution, density: bool) -> None:
        name = root_name(lhs)
        if name is None:
            # `log(sigma) ~ ...` still states sigma's distribution (through a change of
            # variables); attribute it when exactly one program variable is involved.
            declared = [n for n in names_in(lhs) if n in self.summary.declarations]
            name = declared[0] if len(declared) == 1 else None
        decl = self.summary.declarations.get(name) if name else None
        if decl is None:
            return
        if decl.block in PARAMETER_BLOCKS and density:
            decl.priors.append(dist)
        elif decl.block in DATA_BLOCKS:
            used = self.data_reached([n for a in dist.args for n in a.names])
            self.summary.likelihoods.append(Likelihood(decl.name, dist, used))

    def data_reached(self, names: list[str]) -> list[str]:
        """Data variables the names refer to, following local and transformed variables."""
        found: list[str] = []
        seen: set[str] = set()
        todo = list(names)
        while todo:
            name = todo.pop(0)
            if name in seen:
                continue
            seen.add(name)
            decl = self.summary.declarations.get(name)
            if decl is not None and decl.block in DATA_BLOCKS:
                found.append(name)
            elif decl is None or decl.block in {"transformed parameters",
                                                "generated quantities"}:
                todo.extend(self.assigned.get(name, []))
        return found

    def link_hierarchy(self) -> None:
        params = {n for n, d in self.summary.declarations.items() if d.block in PARAMETER_BLOCKS}
        for decl in self.summary.declarations.values():
            for prior in decl.priors:
                if prior.family not in LOCATION_SCALE_ARGS:
                    continue
                for arg, role in ((prior.location_arg(), "location_of"),
                                  (prior.scale_arg(), "scale_of")):
                    if arg is None:
                        continue
                    for ref in arg.names:
                        if ref in params and ref != decl.name:
                            roles = getattr(self.summary.declarations[ref], role)
                            if decl.name not in roles:
                                roles.append(decl.name)


_EXPRESSION_NODES = {
    "binop", "unop", "cond_expr", "indexed", "transpose", "tuple_index", "int_lit",
    "real_lit", "imag_lit", "var", "call", "cond_call", "target_call", "paren",
    "tuple_expr", "array_expr", "row_vector_expr", "expr_list", "printables",
}


def _collect_density_statements(node: Tree, out: list[tuple[Tree, str]]) -> None:
    for child in node.children:
        if not isinstance(child, Tree) or child.data in _EXPRESSION_NODES:
            continue
        if child.data in {"tilde", "target_pe"}:
            out.append((child, child.data))
        else:
            _collect_density_statements(child, out)


def strip_suffix(name: str) -> str:
    """Stan family name without its ``_lpdf``-style suffix."""
    for suffix in DENSITY_SUFFIXES:
        if name.endswith(suffix):
            return name[: -len(suffix)]
    return name


def density_calls(expr: Tree | Token | None) -> list[Tree]:
    """Calls of ``*_lpdf``/``*_lpmf``/``*_lupdf``/``*_lupmf``/``*_lcdf``/``*_lccdf`` in order."""
    found: list[Tree] = []
    if not isinstance(expr, Tree):
        return found
    if expr.data in {"call", "cond_call"}:
        fname = str(expr.children[0])
        if fname.endswith(DENSITY_SUFFIXES + CDF_SUFFIXES):
            found.append(expr)
            return found
    for child in expr.children:
        found.extend(density_calls(child))
    return found


def names_in(node: Tree | Token | None) -> list[str]:
    """Variable names an expression refers to (not function names), first use first."""
    out: list[str] = []

    def visit(n: Tree | Token | None) -> None:
        if not isinstance(n, Tree):
            return
        if n.data == "var":
            out.append(str(n.children[0]))
            return
        children = n.children[1:] if n.data in {"call", "cond_call"} else n.children
        for c in children:
            visit(c)

    visit(node)
    return list(dict.fromkeys(out))


def root_name(node: Tree | Token | None) -> str | None:
    """The variable at the root of ``x``, ``x[i]``, ``x[i][j]``, ``x'`` or ``x.1``."""
    while isinstance(node, Tree):
        if node.data == "var":
            return str(node.children[0])
        if node.data in {"indexed", "transpose", "tuple_index", "paren"}:
            node = node.children[0]
        else:
            return None
    return None


def lvalue_roots(node: Tree | Token | None) -> list[str]:
    """Variables assigned by an assignment's left side, or [] when it is not one.

    ``x``, ``x[...]``, ``x.1`` and combinations (Reference Manual, "Assignment"),
    and tuple unpacking ``(a, b[1]) = ...`` (Reference Manual, "Unpacking
    assignment of tuples").
    """
    if isinstance(node, Tree) and node.data == "tuple_expr":
        first, rest = node.children
        parts = [first, *rest.children]
        roots = [lvalue_roots(p) for p in parts]
        return [r for group in roots for r in group] if all(roots) else []
    while isinstance(node, Tree):
        if node.data == "var":
            return [str(node.children[0])]
        if node.data in {"indexed", "tuple_index"}:
            node = node.children[0]
        else:
            return []
    return []


def literal_value(node: Tree | Token | None) -> float | None:
    """Numeric value of a literal, signed literal or parenthesised literal, else None."""
    if not isinstance(node, Tree):
        return None
    if node.data in {"int_lit", "real_lit"}:
        return float(node.children[0])
    if node.data == "paren":
        return literal_value(node.children[0])
    if node.data == "unop" and str(node.children[0]) in {"-", "+"}:
        inner = literal_value(node.children[1])
        if inner is None:
            return None
        return -inner if str(node.children[0]) == "-" else inner
    return None


def summarize(tree: Tree, source: ExpandedSource, summary: ProgramSummary) -> None:
    """Fill ``summary`` (declarations, priors, likelihoods, hierarchy) from ``tree``."""
    _Builder(source, summary).build(tree)
