"""One module per workbook step; each exposes ``STEP`` (see :class:`studykit.app.shell.Step`)."""
