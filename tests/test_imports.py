"""The imports follow the pipeline: no module imports a stage downstream of its own, no
two modules import each other (directly or around a loop), and the runtime loads only numpy.

The layers, in pipeline order (DEVELOPERS.md, "Layout"): the foundation (``core``, the
errors, the file and worker helpers), then every stage, then the command line (``cli``,
``demo`` and every stage's ``commands`` module, which chain stages).  A module may import
its own layer and those before it.  Imports inside functions count: they are imports all
the same.  There is no list of exceptions.
"""

import ast
import subprocess
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "surrogate3d"

#: Layers in pipeline order; a module belongs to the first whose prefixes it matches.
STAGES = ("scenes", "solvers", "archive", "baselines", "pairs", "runtime", "learn", "evaluation", "export")
FOUNDATION = ("surrogate3d", "surrogate3d.core", "surrogate3d.errors", "surrogate3d._atomic", "surrogate3d._outputs",
              "surrogate3d._workers")
COMMAND_LINE = ("surrogate3d.cli", "surrogate3d.__main__", "surrogate3d.demo")


def module_name(path):
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def layer(name):
    """Index of a module's layer: 0 foundation, 1 .. len(STAGES) the stages, then the command line."""
    last = name.rsplit(".", 1)[-1]
    if name in COMMAND_LINE or last.endswith("commands") or last.endswith("_command"):
        return len(STAGES) + 1
    if name in FOUNDATION or name.startswith("surrogate3d.core."):
        return 0
    stage = name.split(".")[1]
    if stage not in STAGES:
        raise AssertionError(f"{name} belongs to no layer; add its package to STAGES or FOUNDATION")
    return STAGES.index(stage) + 1


def layer_name(index):
    return "foundation" if index == 0 else STAGES[index - 1] if index <= len(STAGES) else "command line"


def imports(path):
    """The surrogate3d modules a file imports (at any depth), with line numbers."""
    name = module_name(path)
    package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
    found = []
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Import):
            targets = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - node.level + 1]
                base = ".".join(base + ([node.module] if node.module else []))
            else:
                base = node.module
            # "from . import x" imports the module x when there is one.
            targets = [f"{base}.{alias.name}" if _is_module(f"{base}.{alias.name}") else base for alias in node.names]
        else:
            continue
        found += [(t, node.lineno) for t in targets if t == "surrogate3d" or t.startswith("surrogate3d.")]
    return found


def _is_module(name):
    relative = Path(*name.split(".")[1:])
    return (PACKAGE / relative).with_suffix(".py").is_file() or (PACKAGE / relative / "__init__.py").is_file()


MODULES = sorted(PACKAGE.rglob("*.py"))


def test_every_module_has_a_layer():
    for path in MODULES:
        layer(module_name(path))


def test_no_import_against_the_pipeline():
    wrong = []
    for path in MODULES:
        source = module_name(path)
        for target, line in imports(path):
            if layer(target) > layer(source):
                wrong.append(f"{path.relative_to(PACKAGE.parent)}:{line} ({layer_name(layer(source))}) imports "
                             f"{target} ({layer_name(layer(target))})")
    assert not wrong, "imports against the pipeline:\n" + "\n".join(wrong)


def test_no_import_cycles():
    # A package's __init__ re-exporting its modules is not a cycle of the modules themselves.
    graph = {module_name(p): {t for t, _ in imports(p) if t != module_name(p)} for p in MODULES}
    for name in graph:
        graph[name] = {t for t in graph[name] if t in graph and not (name.startswith(t + ".") and _is_package(t))}
    cycles = [sorted(component) for component in _components(graph) if len(component) > 1]
    assert not cycles, "modules importing each other: " + "; ".join(" <-> ".join(c) for c in cycles)


def _is_package(name):
    return PACKAGE.joinpath(*name.split(".")[1:], "__init__.py").is_file()


def _components(graph):
    """Strongly connected components (Tarjan 1972), iteratively."""
    index, low, on_stack, stack, out, counter = {}, {}, set(), [], [], [0]
    for root in graph:
        if root in index:
            continue
        work = [(root, iter(sorted(graph[root])))]
        index[root] = low[root] = counter[0]
        counter[0] += 1
        stack.append(root)
        on_stack.add(root)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is None:
                work.pop()
                if work:
                    low[work[-1][0]] = min(low[work[-1][0]], low[node])
                if low[node] == index[node]:
                    component = set()
                    while True:
                        member = stack.pop()
                        on_stack.discard(member)
                        component.add(member)
                        if member == node:
                            break
                    out.append(component)
            elif child not in index:
                index[child] = low[child] = counter[0]
                counter[0] += 1
                stack.append(child)
                on_stack.add(child)
                work.append((child, iter(sorted(graph[child]))))
            elif child in on_stack:
                low[node] = min(low[node], index[child])
    return out


@pytest.mark.parametrize("module", ["surrogate3d.runtime", "surrogate3d.core.data_model",
                                    "surrogate3d.core.coefficient_format", "surrogate3d.core.validation",
                                    "surrogate3d.core.config"])
def test_numpy_only_modules_load_only_numpy(module):
    # The runtime runs inside host models: numpy and the standard library only (common
    # practice for code embedded in other programs); what it builds on must be as light.
    code = (f"import sys, {module}\n"
            "heavy = sorted({m.split('.')[0] for m in sys.modules} & {'xarray', 'pandas', 'scipy', 'numba', 'sklearn',"
            " 'matplotlib', 'netCDF4', 'h5py', 'dask', 'joblib', 'tqdm'})\n"
            "print(heavy)\nsys.exit(1 if heavy else 0)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr
