"""Files: atomic writes, the analysis file format's mechanics, and its strict schema.

:mod:`.atomic` is a base module (stdlib only) that every layer saving a file
uses; :mod:`.analysis_format` and :mod:`.schema` serve
:class:`~firstorder.analysis.Analysis` (the schema imports pydantic, only when a
file is read).  Import the module you need; this package imports none of them.
"""
