"""The foundation every stage builds on, depending on none of them.

The data model's names, kinds and format versions (:mod:`~surrogate3d.core.data_model`),
the run-result schema (:mod:`~surrogate3d.core.run_result`), the pair-table schema and its
reader (:mod:`~surrogate3d.core.pairs_table`), the coefficient format
(:mod:`~surrogate3d.core.coefficient_format`) and coefficient files
(:mod:`~surrogate3d.core.coefficient_file`), generic NetCDF input and output
(:mod:`~surrogate3d.core.netcdf`), the one validation module
(:mod:`~surrogate3d.core.validation`), the defaults and numerical tunables
(:mod:`~surrogate3d.core.config`), and the geometry of paths toward the sun
(:mod:`~surrogate3d.core.slant_path`).  Modules are imported one by one (this package
imports nothing), so that the numpy-only ones stay light for the runtime.
"""
