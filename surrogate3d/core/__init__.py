"""The foundation every stage builds on, depending on none of them.

The data model's names, kinds and format versions (:mod:`~surrogate3d.core.data_model`),
the run-result and pair-table schemas with their readers, generic NetCDF input and output,
the coefficient file format, the one parameter validator, the defaults and numerical
tunables, and the geometry of paths toward the sun.  Modules are imported one by one (this
package imports nothing), so that the numpy-only ones stay light for the runtime.
"""
