"""Compilation options shared by the per-photon kernels.

These kernels allocate nothing, so numba's reference counting is switched off
(``_nrt=False``).  With it on, every array handed to a helper costs an atomic increment
and decrement of the array's shared counter: measured on the shared benchmark scene,
those atomics took about 15 % of the tracing time on one core, and threads working on
the same arrays contend for the counters' cache lines.  A kernel that tried to allocate
would fail to compile, so the option cannot hide a leak.
"""

KERNEL = {"cache": True, "error_model": "numpy", "_nrt": False}
