#!/usr/bin/env python3
"""Checks that a shared libsprig exports exactly the public C and C++ API.

Usage: exported_symbols.py LIBRARY INCLUDE_DIR [NM]

The public API is read from the installed headers in INCLUDE_DIR (runtime/include/sprig):
- C: every function declared in sprig.h (a name `sprig_...` followed by `(`);
- C++: every class, struct or free function declared with SPRIG_API, in namespace sprig.

The library's dynamic symbol table is read with binutils' `nm -D --defined-only` (demangled
with `-C`); NM names the toolchain's own nm in a cross build (default: nm). A Windows DLL has
no dynamic symbol table: its export table is read with the same toolchain's `objdump -p` and
demangled with its `c++filt`. The check fails, listing the offenders, when the library exports
anything outside that API (an internal namespace, a standard-library template instantiated by our code, a helper
without SPRIG_API) or when a declared C function is not exported.
"""

import pathlib
import re
import subprocess
import sys

# Symbols the toolchain itself adds to every shared object: they belong to no API. The list is
# what GNU ld and GCC's runtime put there (common knowledge of ELF shared objects, from memory).
TOOLCHAIN_SYMBOLS = {"_init", "_fini", "_edata", "_end", "__bss_start"}

# Prefixes of C++ symbols that name a class's compiler-generated data (RTTI, vtables); they are
# public when the class is.
CPP_DATA_PREFIXES = ("typeinfo for ", "typeinfo name for ", "vtable for ", "VTT for ")


def public_api(include_dir):
    """Returns (C function names, C++ public names in namespace sprig)."""
    c_functions, cpp_names = set(), set()
    for header in sorted(pathlib.Path(include_dir).glob("*.h")):
        text = header.read_text(encoding="utf-8")
        # Comments may mention names that are not declarations; drop them first.
        text = re.sub(r"/\*.*?\*/", "", text, flags=re.S)
        text = re.sub(r"//[^\n]*", "", text)
        # Preprocessor lines (export.h defines SPRIG_API itself) declare nothing.
        text = re.sub(r"^\s*#[^\n]*", "", text, flags=re.M)
        if header.name == "sprig.h":
            c_functions.update(re.findall(r"\b(sprig_[a-z0-9_]+)\s*\(", text))
        for m in re.finditer(r"\b(?:class|struct)\s+SPRIG_API\s+(\w+)", text):
            cpp_names.add(m.group(1))
        # A free function: SPRIG_API, its return type, then its name and '('.
        for m in re.finditer(r"\bSPRIG_API\s+[^;{()]*?\b(\w+)\s*\(", text):
            if not m.group(1).startswith("sprig_"):
                cpp_names.add(m.group(1))
    return c_functions, cpp_names


def sibling_tool(nm, name):
    """The binutils program `name` of the toolchain whose nm is `nm` (x86_64-w64-mingw32-nm ->
    x86_64-w64-mingw32-objdump)."""
    return re.sub(r"nm(\.exe)?$", name, nm)


def dll_exports(library, nm):
    """The names in a PE file's export table, demangled."""
    out = subprocess.run([sibling_tool(nm, "objdump"), "-p", library], check=True,
                         capture_output=True, text=True).stdout
    # objdump prints the export names as "[ ordinal] name" lines after this table heading.
    table = out.split("[Ordinal/Name Pointer] Table", 1)
    if len(table) != 2:
        return []
    names = re.findall(r"^\s*\[\s*\d+\]\s+(\S+)\s*$", table[1], flags=re.M)
    demangled = subprocess.run([sibling_tool(nm, "c++filt")], input="\n".join(names), check=True,
                               capture_output=True, text=True).stdout
    return demangled.splitlines()


def exported_symbols(library, nm):
    if library.lower().endswith(".dll"):
        return dll_exports(library, nm)
    out = subprocess.run([nm, "-D", "--defined-only", "-C", library], check=True,
                         capture_output=True, text=True).stdout
    symbols = []
    for line in out.splitlines():
        parts = line.split(None, 2)
        if len(parts) == 3:
            symbols.append(parts[2])
    return symbols


def is_public_cpp(symbol, cpp_names):
    for prefix in CPP_DATA_PREFIXES:
        if symbol.startswith(prefix):
            symbol = symbol[len(prefix):]
            break
    # sprig::Name, sprig::Name::member(...), sprig::Name(...) and nothing deeper in a nested
    # namespace: the first component after sprig:: must be a public name.
    m = re.match(r"sprig::(\w+)", symbol)
    return m is not None and m.group(1) in cpp_names


def main(argv):
    if len(argv) not in (3, 4):
        print(__doc__.strip(), file=sys.stderr)
        return 2
    library, include_dir = argv[1], argv[2]
    nm = argv[3] if len(argv) == 4 else "nm"
    c_functions, cpp_names = public_api(include_dir)
    if not c_functions or not cpp_names:
        print(f"no public API found in {include_dir}", file=sys.stderr)
        return 2
    unexpected, exported_c = [], set()
    for symbol in exported_symbols(library, nm):
        # Version nodes of a version script show as absolute symbols named after the node.
        if symbol in TOOLCHAIN_SYMBOLS or re.fullmatch(r"SPRIG_[0-9_.A-Z]+", symbol):
            continue
        if "::" not in symbol and " " not in symbol and "(" not in symbol:
            if symbol in c_functions:
                exported_c.add(symbol)
                continue
        elif is_public_cpp(symbol, cpp_names):
            continue
        unexpected.append(symbol)
    missing = sorted(c_functions - exported_c)
    for s in sorted(unexpected):
        print(f"exported but not public API: {s}")
    for s in missing:
        print(f"declared in sprig.h but not exported: {s}")
    print(f"{library}: {len(exported_c)} C functions, public C++ names {sorted(cpp_names)}; "
          f"{len(unexpected)} unexpected, {len(missing)} missing")
    return 1 if unexpected or missing else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
