"""The browser workbook (ipywidgets + bokeh, served by Voila). No statistics in here."""
