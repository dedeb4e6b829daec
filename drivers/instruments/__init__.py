"""One module per driver; `drivers.registry` finds them by scanning this package.

A module here defines one or more `drivers.base.Driver` subclasses, each with a ``DRIVER_NAME``
(the name a bench file gives as ``driver = ...``) and a ``ROLE``. Modules whose name starts with
an underscore are skipped.
"""
