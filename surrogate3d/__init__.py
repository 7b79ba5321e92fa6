"""surrogate3d: learn, validate and export corrections for 3D cloud radiative effects.

Data flow, one stage per subpackage::

    scenes -> solvers -> archive -> pairs (features) -> learn -> evaluation -> export
                                        baselines --^

``surrogate3d.runtime`` is the numpy-only runtime that host models use to apply an
exported correction.
"""

__version__ = "0.1.0"
