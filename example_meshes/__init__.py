"""The bundled demo study (data only), installed as ``shapedesc.example_study``.

Invented data written by :mod:`shapedesc.demo_study` with its fixed seed; see README.md
in this folder.  ``shapedesc demo`` finds it with
``importlib.resources.files("shapedesc.example_study")``.
"""
