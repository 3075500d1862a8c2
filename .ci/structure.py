#!/usr/bin/env python3
"""Size and layering of the Rust modules under a folder of src/.

    .ci/structure.py [--no-parent-edges] [DIR ...]        (default: src)

Prints, for the .rs files under each DIR:
  - the ten longest functions: lines from the line holding `fn` to the line of its closing
    brace, both included (nested closures and inner functions count towards the outer one too);
  - the ten longest files (all lines);
  - every import circle among the crate's modules that involves a module under DIR.

A module uses another when its code (comments, strings and `#[cfg(test)] mod tests` left out)
names a path into it: `use crate::a::b::..`, `super::x`, `self::x`, or such a path inline. A path
counts towards the deepest module it names, so `super::folds::assign` is a use of `folds`, while
`pub use target::X` in a `mod.rs` is a use of `target`. Declaring a child (`pub mod x;`) is not a
use. With --no-parent-edges, uses between a module and one of its ancestors (a facade `mod.rs`
re-exporting its children, a child reading its parent's items) are left out. Exit status 1 when
a circle is found.
"""

import os
import re
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
SRC = os.path.join(ROOT, "src")


def strip(text):
    """Blank out comments, string and char literals, keeping line breaks and braces' places."""
    out = []
    i, n = 0, len(text)
    while i < n:
        c = text[i]
        if text.startswith("//", i):
            j = text.find("\n", i)
            j = n if j < 0 else j
            out.append(" " * (j - i))
            i = j
        elif text.startswith("/*", i):
            depth, j = 1, i + 2
            while j < n and depth:
                if text.startswith("/*", j):
                    depth, j = depth + 1, j + 2
                elif text.startswith("*/", j):
                    depth, j = depth - 1, j + 2
                else:
                    j += 1
            out.append(re.sub(r"[^\n]", " ", text[i:j]))
            i = j
        elif c == "r" and re.match(r'r#*"', text[i:]) and (i == 0 or not (text[i - 1].isalnum() or text[i - 1] == "_")):
            hashes = re.match(r"r(#*)\"", text[i:]).group(1)
            end = text.find('"' + hashes, i + 2 + len(hashes))
            end = n if end < 0 else end + 1 + len(hashes)
            out.append(re.sub(r"[^\n]", " ", text[i:end]))
            i = end
        elif c == '"':
            j = i + 1
            while j < n and text[j] != '"':
                j += 2 if text[j] == "\\" else 1
            out.append(re.sub(r"[^\n]", " ", text[i : j + 1]))
            i = j + 1
        elif c == "'":
            # A char literal ('x', '\n', '\u{..}') or a lifetime ('a).
            m = re.match(r"'(\\u\{[0-9a-fA-F]+\}|\\.|[^\\'])'", text[i:])
            if m:
                out.append(" " * len(m.group(0)))
                i += len(m.group(0))
            else:
                out.append(c)
                i += 1
        else:
            out.append(c)
            i += 1
    return "".join(out)


def drop_test_modules(code):
    """Blank out `#[cfg(test)] mod name { ... }` blocks (their `super` is the file's module)."""
    for m in list(re.finditer(r"#\[cfg\(test\)\]\s*mod\s+\w+\s*\{", code)):
        start = m.start()
        depth, j = 0, m.end() - 1
        while j < len(code):
            if code[j] == "{":
                depth += 1
            elif code[j] == "}":
                depth -= 1
                if depth == 0:
                    break
            j += 1
        code = code[:start] + re.sub(r"[^\n]", " ", code[start : j + 1]) + code[j + 1 :]
    return code


def functions(code):
    """(name, first line, last line) of every `fn` with a body."""
    found = []
    for m in re.finditer(r"\bfn\s+(\w+)", code):
        # The body starts at the first `{` after the signature, unless a `;` comes first.
        j, paren = m.end(), 0
        while j < len(code):
            ch = code[j]
            if ch in "(<[":
                paren += 1
            elif ch in ")>]":
                paren -= 1
            elif ch == ";" and paren <= 0:
                j = -1
                break
            elif ch == "{" and paren <= 0:
                break
            j += 1
        if j < 0 or j >= len(code):
            continue
        depth, k = 0, j
        while k < len(code):
            if code[k] == "{":
                depth += 1
            elif code[k] == "}":
                depth -= 1
                if depth == 0:
                    break
            k += 1
        first = code.count("\n", 0, m.start()) + 1
        last = code.count("\n", 0, k) + 1
        found.append((m.group(1), first, last))
    return found


def module_of(path):
    rel = os.path.relpath(path, SRC)[:-3].split(os.sep)
    if rel[-1] in ("mod", "lib", "main"):
        rel = rel[:-1]
    return tuple(rel)


def rust_files(folder):
    for dirpath, _, names in os.walk(folder):
        for name in sorted(names):
            if name.endswith(".rs"):
                yield os.path.join(dirpath, name)


def uses(mod, code, modules):
    """Modules named by the paths in `code` of module `mod`."""
    found = set()
    # Expand `use a::{b, c::{d}}` groups into whole paths first.
    paths = []
    for m in re.finditer(r"\buse\s+([^;]+);", code):
        paths.extend(expand(re.sub(r"\s+", "", m.group(1))))
    for m in re.finditer(r"\b((?:crate|super|self)(?:::\w+)+)", code):
        paths.append(m.group(1))
    for p in paths:
        parts = p.split("::")
        if parts[0] == "crate":
            base, rest = (), parts[1:]
        elif parts[0] in ("super", "self"):
            base, rest = mod, parts
            while rest and rest[0] in ("super", "self"):
                if rest[0] == "super":
                    base = base[:-1]
                rest = rest[1:]
        else:
            # A path relative to the current module (`use target::X` inside a mod.rs).
            base, rest = mod, parts
            if tuple(base) + (rest[0],) not in modules:
                continue
        target = tuple(base)
        for part in rest:
            if target + (part,) in modules:
                target = target + (part,)
            else:
                break
        if target != mod and target in modules:
            found.add(target)
    return found


def expand(path):
    """`a::{b, c::{d, e}}` -> [`a::b`, `a::c::d`, `a::c::e`]."""
    i = path.find("{")
    if i < 0:
        return [path.split(" as ")[0]]
    head, body = path[:i], path[i + 1 : path.rfind("}")]
    items, depth, cur = [], 0, ""
    for ch in body:
        if ch == "," and depth == 0:
            items.append(cur)
            cur = ""
            continue
        depth += ch == "{"
        depth -= ch == "}"
        cur += ch
    if cur:
        items.append(cur)
    out = []
    for item in items:
        if item == "self":
            out.append(head.rstrip(":"))
        elif item:
            out.extend(expand(head + item))
    return out


def cycles(graph):
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out = {}, {}, [], set(), []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    sys.setrecursionlimit(10000)
    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def main():
    args = sys.argv[1:]
    no_parent = "--no-parent-edges" in args
    folders = [a for a in args if not a.startswith("--")] or ["src"]
    files = list(rust_files(SRC))
    modules = {module_of(f) for f in files}
    graph = {}
    for f in files:
        with open(f, encoding="utf-8") as fh:
            code = drop_test_modules(strip(fh.read()))
        mod = module_of(f)
        found = uses(mod, code, modules)
        if no_parent:
            related = lambda a, b: a[: len(b)] == b or b[: len(a)] == a
            found = {m for m in found if not related(mod, m)}
        graph.setdefault(mod, set()).update(found)
    status = 0
    for folder in folders:
        folder = os.path.abspath(os.path.join(ROOT, folder))
        chosen = list(rust_files(folder))
        fns, sizes = [], []
        for f in chosen:
            with open(f, encoding="utf-8") as fh:
                text = fh.read()
            rel = os.path.relpath(f, ROOT)
            sizes.append((text.count("\n"), rel))
            for name, first, last in functions(strip(text)):
                fns.append((last - first + 1, f"{rel}:{first}", name))
        print(f"== {os.path.relpath(folder, ROOT)}")
        print("longest functions (lines):")
        for length, where, name in sorted(fns, reverse=True)[:10]:
            print(f"  {length:5}  {name}  {where}")
        print("longest files (lines):")
        for length, rel in sorted(sizes, reverse=True)[:10]:
            print(f"  {length:5}  {rel}")
        inside = {module_of(f) for f in chosen}
        found = [c for c in cycles(graph) if any(m in inside for m in c)]
        print("import circles:" + ("" if found else " none"))
        name = lambda m: "::".join(m) or "crate"
        for c in found:
            status = 1
            print("  " + " <-> ".join(name(m) for m in c))
            for m in c:
                inner = sorted(name(t) for t in graph[m] if t in c)
                print(f"      {name(m)} uses {', '.join(inner)}")
    return status


if __name__ == "__main__":
    sys.exit(main())
