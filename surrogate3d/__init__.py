"""surrogate3d: learn, validate and export corrections for 3D cloud radiative effects.

Data flow, one stage per subpackage, each importing only the stages to its left and
``surrogate3d.core`` (the names, schemas, file formats, validation and defaults they
share)::

    scenes -> solvers -> archive -> baselines -> pairs -> runtime -> learn -> evaluation -> export

``surrogate3d.runtime`` is the numpy-only runtime that host models use to apply an
exported correction; ``DEVELOPERS.md`` ("Layout") says where everything lives.
"""

__version__ = "0.1.0"
