"""Prints module sizes (lines of code, docstrings excluded) and functions over a line limit.

Usage: python benchmarks/sizes.py [ROOT] [--limit 80]. STYLE.md aims at modules of 100-400
lines of code (600 at most) and functions of at most ~80 lines; this shows where the code is.
"""

from __future__ import annotations

import argparse
import ast
from pathlib import Path


def _docstring_lines(tree: ast.Module) -> set[int]:
    out: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)):
            first = node.body[0] if node.body else None
            value = first.value if isinstance(first, ast.Expr) else None
            if isinstance(value, ast.Constant) and isinstance(value.value, str):
                out.update(range(first.lineno, (first.end_lineno or 0) + 1))  # type: ignore[union-attr]
    return out


def code_lines(path: Path) -> int:
    text = path.read_text()
    skip = _docstring_lines(ast.parse(text))
    return sum(
        1
        for i, line in enumerate(text.splitlines(), 1)
        if i not in skip and line.strip() and not line.strip().startswith("#")
    )


def long_functions(path: Path, limit: int) -> list[tuple[str, int]]:
    """Functions with more than ``limit`` lines of code (docstrings and comments excluded)."""
    text = path.read_text()
    tree = ast.parse(text)
    skip = _docstring_lines(tree)
    lines = text.splitlines()
    out = []
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            span = range(node.lineno, (node.end_lineno or node.lineno) + 1)
            n = sum(
                1
                for i in span
                if i not in skip
                and lines[i - 1].strip()
                and not lines[i - 1].strip().startswith("#")
            )
            if n > limit:
                out.append((node.name, n))
    return out


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("root", nargs="?", default=".")
    p.add_argument("--limit", type=int, default=80)
    args = p.parse_args()
    root = Path(args.root)
    files = sorted(f for d in ("service", "workers", "tuttiml") for f in (root / d).rglob("*.py"))
    sizes = sorted(((code_lines(f), f.relative_to(root)) for f in files), reverse=True)
    print(f"{len(files)} modules, {sum(s for s, _ in sizes)} lines of code")
    print("largest modules (lines of code):")
    for n, f in sizes[:10]:
        print(f"  {n:5d}  {f}")
    print(f"functions over {args.limit} lines of code:")
    for f in files:
        for name, n in long_functions(f, args.limit):
            print(f"  {n:5d}  {f.relative_to(root)}:{name}")


if __name__ == "__main__":
    main()
