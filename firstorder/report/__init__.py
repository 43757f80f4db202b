"""Reports of an analysis: rows shared by every front end, MathML, HTML, Markdown, the figure.

:mod:`.tables` (rows and cells of text, shared by the HTML and Markdown reports,
the command line and the Bench), :mod:`.mathml` (sympy as MathML, names
escaped), :mod:`.html` (the standalone offline page), :mod:`.markdown` (for lab
records) and :mod:`.figure` (the page's bokeh plot).  Import the module you
need: this package imports none of them, and only :mod:`.figure` needs bokeh.
"""
