"""The notebook app and the report figure: the only package that imports ipywidgets or bokeh."""
