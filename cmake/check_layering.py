#!/usr/bin/env python3
"""Checks every #include of the tree against the layering tables in DEVELOPERS.md ("Layout").

The tables are the one statement of which folder may use which: CMake's include directories
enforce the top level (a target sees only the folders it links), and this check enforces the
same table file by file, plus the second table, the folders inside runtime/src/, which share one
include root and so cannot be told apart by the compiler. The build runs it before compiling
the libraries (cmake/layering.cmake), and CTest runs it as the test `layering`.

An include is resolved the way the compiler does (beside the including file, then the include
roots) and judged by the folder of the file it names, so "../x.h" cannot climb either. A
failure prints `file:line: error: ...` naming the include and the rule, and the exit status is 1.

  check_layering.py SOURCE_DIR [--links FILE] [--stamp FILE]

--links reads the CMake targets' folders and direct links (written by cmake/layering.cmake) and
checks each link against the same table. --stamp is touched when everything passes.
"""

import argparse
import os
import re
import sys

TABLES_DOC = "DEVELOPERS.md"
SECTION = "## Layout"
SOURCE_SUFFIXES = (".h", ".hpp", ".cc", ".cpp", ".c")
INCLUDE = re.compile(r'^\s*#\s*include\s*([<"])([^>"]+)[>"]')
# The runtime's include roots: its public headers and its internal folders.
PUBLIC_ROOT = "runtime/include"
INTERNAL_ROOT = "runtime/src"
# The generated schema header lives in the build tree: its include prefix names its folder.
SCHEMA_PREFIX = "sprig_schema/"


class TableError(Exception):
    pass


def read_tables(path):
    """Returns (top, inner): folder -> (set of names it may use, or None for all)."""
    with open(path, encoding="utf-8") as f:
        lines = f.read().splitlines()
    try:
        start = lines.index(SECTION)
    except ValueError:
        raise TableError(f'{path}: no "{SECTION}" section')
    tables, current = [], None
    for number, line in enumerate(lines[start + 1:], start + 2):
        if line.startswith("## "):
            break
        if not line.startswith("|"):
            current = None
            continue
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if current is None:
            current = {"header": cells, "rows": {}}
            tables.append(current)
            continue
        if set(cells[0]) <= set("-: "):
            continue
        folder = re.fullmatch(r"`([\w/]+)/`", cells[0])
        if not folder:
            raise TableError(f"{path}:{number}: the folder cell must read `name/`: {cells[0]}")
        current["rows"][folder.group(1)] = (parse_uses(cells[-1]), number)
    top = [t for t in tables if t["header"][0] == "folder"]
    inner = [t for t in tables if t["header"][0] == f"folder in `{INTERNAL_ROOT}/`"]
    if len(top) != 1 or len(inner) != 1:
        raise TableError(f'{path}: "{SECTION}" must hold one table headed "folder" and one '
                         f'headed "folder in `{INTERNAL_ROOT}/`"')
    return top[0]["rows"], inner[0]["rows"]


def parse_uses(cell):
    """The "may use" cell: `names` in backquotes, "all" or "—"; parentheses hold comments."""
    cell = re.sub(r"\([^)]*\)", "", cell)
    if cell.split(" ")[0] == "all":
        return None
    return set(re.findall(r"`([\w/]+)`", cell))


class Tree:
    def __init__(self, root, top, inner):
        self.root, self.top, self.inner = root, top, inner
        self.roots = [PUBLIC_ROOT, INTERNAL_ROOT, ""]

    def resolve(self, including, kind, name):
        """The tree-relative path `name` denotes (schema/... for the generated header), or None."""
        if name.startswith(SCHEMA_PREFIX):
            return "schema/" + name
        candidates = [os.path.dirname(including)] if kind == '"' else []
        candidates += self.roots
        for base in candidates:
            path = os.path.normpath(os.path.join(base, name))
            if not path.startswith("..") and os.path.isfile(os.path.join(self.root, path)):
                return path
        return None

    @staticmethod
    def place(path):
        """(top-level folder, runtime/src folder or None, the name a table uses for it)."""
        parts = path.split("/")
        if path.startswith(INTERNAL_ROOT + "/") and len(parts) > 3:
            return "runtime", parts[2], f"{INTERNAL_ROOT}/{parts[2]}"
        if path.startswith(PUBLIC_ROOT + "/"):
            return "runtime", None, PUBLIC_ROOT
        return parts[0], None, parts[0]

    def allows_top(self, user, used, used_name):
        uses = self.top[user][0]
        return uses is None or used == user or used_name in uses or used in uses

    def check_file(self, path):
        errors = []
        top, inner, name_of_file = self.place(path)
        if top not in self.top:
            return [f"{path}:1: error: layering: {top}/ has no row in the layout table of "
                    f"{TABLES_DOC}"]
        if inner is not None and inner not in self.inner:
            return [f"{path}:1: error: layering: {INTERNAL_ROOT}/{inner}/ has no row in the "
                    f"{INTERNAL_ROOT}/ table of {TABLES_DOC}"]
        with open(os.path.join(self.root, path), encoding="utf-8", errors="replace") as f:
            for number, line in enumerate(f, 1):
                match = INCLUDE.match(line)
                if not match:
                    continue
                kind, name = match.groups()
                target = self.resolve(path, kind, name)
                if target is None:
                    continue  # a system or third-party header
                used, used_inner, used_name = self.place(target)
                where = f"{path}:{number}: error: layering: "
                if name_of_file == PUBLIC_ROOT and used_name != PUBLIC_ROOT:
                    errors.append(f'{where}a public header may not include "{name}" (the '
                                  f"installed headers use {PUBLIC_ROOT}/ only)")
                elif not self.allows_top(top, used, used_name):
                    errors.append(f'{where}{top}/ may not include "{name}" ({used_name}/ is not '
                                  f"in {top}/'s \"may use\" in {TABLES_DOC}, Layout)")
                elif inner is not None and used_inner is not None and used_inner != inner:
                    uses = self.inner[inner][0]
                    if uses is not None and used_inner not in uses:
                        errors.append(f'{where}{INTERNAL_ROOT}/{inner}/ may not include "{name}" '
                                      f"({used_inner}/ is not in {inner}/'s \"may use\" in "
                                      f"{TABLES_DOC}, Layout)")
        return errors

    def sources(self):
        for folder in sorted(self.top):
            for directory, subdirectories, files in os.walk(os.path.join(self.root, folder)):
                subdirectories[:] = sorted(d for d in subdirectories if not d.startswith("."))
                for name in sorted(files):
                    if name.endswith(SOURCE_SUFFIXES):
                        yield os.path.relpath(os.path.join(directory, name), self.root)


def check_links(path, top):
    """Each line of `path`: FOLDER TARGET LINKED_FOLDER...; each link must be in FOLDER's row."""
    errors = []
    with open(path, encoding="utf-8") as f:
        for line in f:
            fields = line.split()
            if not fields:
                continue
            folder, target, linked = fields[0].split("/")[0], fields[1], fields[2:]
            if folder not in top:
                errors.append(f"{path}: error: layering: target {target} is in {folder}/, which "
                              f"has no row in the layout table of {TABLES_DOC}")
                continue
            uses = top[folder][0]
            for other in linked:
                # A link to the runtime's internals allows what any runtime/src/ name allows.
                internal = other == INTERNAL_ROOT and any(
                    use.startswith(INTERNAL_ROOT + "/") for use in uses or ())
                if not (uses is None or other.split("/")[0] in (folder, *uses) or other in uses
                        or internal):
                    errors.append(f"{path}: error: layering: target {target} ({folder}/) links "
                                  f"{other}/, which is not in {folder}/'s \"may use\" in "
                                  f"{TABLES_DOC}, Layout")
    return errors


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("source_dir")
    parser.add_argument("--links")
    parser.add_argument("--stamp")
    args = parser.parse_args()
    try:
        top, inner = read_tables(os.path.join(args.source_dir, TABLES_DOC))
    except TableError as error:
        print(f"error: layering: {error}", file=sys.stderr)
        return 1
    tree = Tree(args.source_dir, top, inner)
    errors = []
    for path in tree.sources():
        # Named from the source folder given, so that a build's log points at the file.
        errors += [os.path.join(os.path.normpath(args.source_dir), error)
                   for error in tree.check_file(path)]
    if args.links:
        errors += check_links(args.links, top)
    for error in errors:
        print(error, file=sys.stderr)
    if errors:
        return 1
    if args.stamp:
        with open(args.stamp, "w", encoding="utf-8") as f:
            f.write("ok\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
