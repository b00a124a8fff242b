"""studykit: capability studies for new parts and processes.

The package is layered: ``studykit.stats`` is a pure numerical core (numpy in, frozen results
out); ``studykit.data`` and ``studykit.store`` read measurement files and keep the study file;
``studykit.analysis`` turns a study into one frozen result tree; the workbook (``studykit.app``),
the PDF (``studykit.report``) and the command line (``studykit.cli``) only render that tree.
"""

__version__ = "0.1.0"
