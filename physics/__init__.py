"""elopt's physics layer: geometry, electrode families, boundary-element solvers, fields.

Usable on its own (a notebook needs nothing from ``elopt.optimizer``); importing it changes no
process-wide setting. Processes that run many solves side by side should call
:func:`elopt.physics.threads.limit_blas_threads` first (the ``elopt`` command and its workers do).
"""
