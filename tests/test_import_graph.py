"""The package's import graph: no cycles, and a numerical core that stays numerical.

The layers (DEVELOPERS.md, "Layout"): the numerical core (photosphere, dust, observe,
model, the model components, likelihood) takes plain values and raises plain errors;
configuration, sampling, posterior handling, reports and the command line sit above it.
These tests read every module's ``import`` statements with :mod:`ast` (function-level
imports included), so a late import cannot hide an edge.
"""

import ast
from collections import defaultdict
from pathlib import Path

PKG = Path(__file__).resolve().parents[1] / "teffmc"

# the numerical core and what it must not import
CORE = ("teffmc.photosphere", "teffmc.dust", "teffmc.observe", "teffmc.model",
        "teffmc.components", "teffmc.likelihood")
UPPER = ("teffmc.config", "teffmc.config_spec", "teffmc.run", "teffmc.pipeline",
         "teffmc.report", "teffmc.rereport", "teffmc.posterior", "teffmc.batch", "teffmc.cli",
         "teffmc.demo", "teffmc.compare", "teffmc.sample", "teffmc.sampling_coords",
         "teffmc.derived", "teffmc.stacking_run")
FORBIDDEN_EXTERNAL = ("arviz", "matplotlib", "emcee", "xarray", "tomllib")
# modules of the core that read or write files, by design: data readers, the grid file
# format, the grid importer and the optics-table cache. Everything else in the core
# must not touch files.
FILE_IO = {"teffmc.observe._readers", "teffmc.observe._text", "teffmc.observe.filters",
           "teffmc.observe.photometry", "teffmc.photosphere.gridfile",
           "teffmc.photosphere.importer", "teffmc.dust.cache"}
IO_MODULES = ("h5py", "netCDF4", "shutil", "pickle")
PATH_IO = ("open", "read_text", "write_text", "read_bytes", "write_bytes", "unlink", "mkdir")
NUMPY_IO = ("load", "save", "savez", "fromfile", "tofile", "loadtxt", "savetxt", "genfromtxt")


def _file_calls(tree):
    """Calls that touch files: open(), Path methods, numpy's readers and writers."""
    for node in ast.walk(tree):
        if not isinstance(node, ast.Call):
            continue
        fn = node.func
        if isinstance(fn, ast.Name) and fn.id == "open":
            yield f"open() line {node.lineno}"
        elif isinstance(fn, ast.Attribute):
            owner = fn.value.id if isinstance(fn.value, ast.Name) else ""
            if fn.attr in PATH_IO and owner not in ("np", "numpy"):
                yield f"{fn.attr}() line {node.lineno}"
            elif fn.attr in NUMPY_IO and owner in ("np", "numpy"):
                yield f"{owner}.{fn.attr}() line {node.lineno}"


def _modules():
    mods = {}
    for f in sorted(PKG.rglob("*.py")):
        parts = list(f.relative_to(PKG.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        mods[".".join(parts)] = f
    return mods


def _graph():
    """Internal edges and external top-level names, per module."""
    mods = _modules()
    internal, external = defaultdict(set), defaultdict(set)
    for name, f in mods.items():
        pkg = name if f.name == "__init__.py" else name.rsplit(".", 1)[0]
        for node in ast.walk(ast.parse(f.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom):
                if node.level:
                    base = pkg.split(".")[:len(pkg.split(".")) - node.level + 1]
                    target = ".".join(base + ([node.module] if node.module else []))
                else:
                    target = node.module
                if not target.startswith("teffmc"):
                    external[name].add(target.split(".")[0])
                    continue
                for alias in node.names:       # "from pkg import submodule" is an edge
                    sub = f"{target}.{alias.name}"   # to the submodule, not the package
                    internal[name].add(sub if sub in mods else target)
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name.startswith("teffmc"):
                        internal[name].add(alias.name)
                    else:
                        external[name].add(alias.name.split(".")[0])
    for name in internal:
        internal[name].discard(name)
    return mods, internal, external


def _cycles(graph, nodes):
    """Strongly connected components with more than one module (Tarjan 1972)."""
    index, low, stack, on, out, counter = {}, {}, [], set(), [], [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in graph.get(v, ()):
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

    for v in nodes:
        if v not in index:
            visit(v)
    return out


def _in(name, prefixes):
    return any(name == p or name.startswith(p + ".") for p in prefixes)


def test_no_import_cycles():
    mods, internal, _ = _graph()
    assert _cycles(internal, list(mods)) == []


def test_cycle_finder_finds_a_cycle():
    # the checker itself: a -> b -> c -> a is one component, d alone is none
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert _cycles(graph, ["a", "b", "c", "d"]) == [["a", "b", "c"]]


def test_core_does_not_import_the_layers_above():
    mods, internal, external = _graph()
    bad = {}
    for name in mods:
        if not _in(name, CORE):
            continue
        up = sorted(t for t in internal[name] if _in(t, UPPER))
        ext = sorted(external[name] & set(FORBIDDEN_EXTERNAL))
        if up or ext:
            bad[name] = up + ext
    assert bad == {}


def test_file_call_finder():
    # the checker itself finds the three kinds of call and passes a cache object's load
    code = "open(p)\nPath(p).write_text(s)\nnp.save(p, a)\ncache.load(k)\nx.mkdir()\n"
    assert [h.split()[0] for h in _file_calls(ast.parse(code))] == [
        "open()", "write_text()", "np.save()", "mkdir()"]


def test_core_file_io_only_in_named_modules():
    mods, _, external = _graph()
    bad = {}
    for name, f in mods.items():
        if not _in(name, CORE) or name in FILE_IO:
            continue
        hits = sorted(external[name] & set(IO_MODULES))
        hits += list(_file_calls(ast.parse(f.read_text(encoding="utf-8"))))
        if hits:
            bad[name] = hits
    assert bad == {}
