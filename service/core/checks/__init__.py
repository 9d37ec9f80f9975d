"""The check families: one module per family, holding its statistics and, in ``CHECKS``, the
declaration of each of its checks (see :mod:`service.core.registry`). Every module here is
found by :func:`service.core.registry.all_checks`."""
