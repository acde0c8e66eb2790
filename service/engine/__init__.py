"""The numeric engine: pure functions and frozen dataclasses, no I/O, no Flask.

Rules for this package (checked by tests/engine/test_purity.py):

* no import of flask, werkzeug or marshmallow, no reading of files or the environment
  (the catalog loader in ``catalog.py`` reads a file only when handed a path);
* every quantity is in SI base units and carries its unit in its name
  (``f_low_hz``, ``r_gain_ohm``, ``c_couple_f``), gains are magnitudes unless named ``*_db``;
* everything is deterministic: the same arguments give the same numbers, and random
  draws take an explicit ``numpy.random.Generator``;
* problems with the *request* raise :class:`service.engine.errors.EngineError`
  (a ``ValueError``), which the web layer maps to 422 in one place.
"""
