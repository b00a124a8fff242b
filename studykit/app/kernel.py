"""The workbook's kernel: IPython's kernel without the debugger back end.

``python -m studykit.app.kernel -f CONNECTION_FILE`` starts the same kernel as
``python -m ipykernel_launcher``, except that ``debugpy`` is not imported. ipykernel imports
``debugpy.server`` in every kernel it starts so that a notebook front end can debug it; Voila's
pages have no debugger, and that import alone holds about 16 MB of every kernel (RSS, measured on
this project's machine: 22 MB before, 38 MB after ``from debugpy.server import api``) and takes
0.2 s of its start. Without it ipykernel leaves "debugger" out of the features its
``kernel_info`` lists and otherwise runs unchanged. With a study to open, the modules of the landing view are
imported from the kernel's first moment (:func:`preload`).

:class:`WorkbookKernelSpecs` hands this module to the server's kernels
(:mod:`studykit.app.server`) in place of ``ipykernel_launcher`` in the kernel's command line.
"""

from __future__ import annotations

import importlib
import os
import sys
import threading
from pathlib import Path

from jupyter_client.kernelspec import KernelSpecManager

LAUNCHER = "ipykernel_launcher"
MODULE = "studykit.app.kernel"


def workbook_argv(argv: list[str]) -> list[str]:
    """``argv`` of a kernel spec with ``-m ipykernel_launcher`` replaced by this module.

    Any other command line (another language, another launcher) is returned unchanged.

    Examples
    --------
    >>> workbook_argv(["python", "-m", "ipykernel_launcher", "-f", "{connection_file}"])
    ['python', '-m', 'studykit.app.kernel', '-f', '{connection_file}']
    >>> workbook_argv(["R", "--slave", "-f", "{connection_file}"])
    ['R', '--slave', '-f', '{connection_file}']
    """
    out = list(argv)
    for i in range(len(out) - 1):
        if out[i] == "-m" and out[i + 1] == LAUNCHER:
            out[i + 1] = MODULE
            break
    return out


class WorkbookKernelSpecs(KernelSpecManager):
    """The installed kernel specs, with Python kernels started by :mod:`studykit.app.kernel`."""

    def get_kernel_spec(self, kernel_name: str):
        spec = super().get_kernel_spec(kernel_name)
        spec.argv = workbook_argv(spec.argv)
        return spec


#: The modules the workbook's landing view imports: with a study to open (``$STUDYKIT_STUDY``)
#: the kernel imports them in a thread from its first moment, while it starts and waits for
#: the server to send it the notebook (``STUDYKIT_KERNEL_PRELOAD=0`` turns this off). The
#: landing view imports each of them anyway, so the kernel holds nothing more. Nothing that
#: imports ``ipywidgets`` or ``IPython`` may be here: ipywidgets registers its comm targets on
#: import only when the kernel's shell exists already.
PRELOAD = ("numpy", "studykit.analysis", "studykit.store", "bokeh.models", "bokeh.plotting")
ENV_PRELOAD = "STUDYKIT_KERNEL_PRELOAD"
ENV_STUDY = "STUDYKIT_STUDY"  # the same name as studykit.app.shell.ENV_STUDY


def preload(modules=PRELOAD) -> threading.Thread | None:
    """Import ``modules`` in a daemon thread (the notebook's own imports then find them done,
    or wait for the one under way: Python's import lock is per module); None when off."""
    if os.environ.get(ENV_PRELOAD, "1") == "0" or not os.environ.get(ENV_STUDY):
        return None

    def run():
        for name in modules:
            try:
                importlib.import_module(name)
            except Exception:  # noqa: BLE001, S112 - the notebook's own import reports it
                continue

    thread = threading.Thread(target=run, name="studykit-preload", daemon=True)
    thread.start()
    return thread


def main() -> None:
    """Start the kernel (what ``ipykernel_launcher`` does), with ``debugpy`` left out."""
    # as ipykernel_launcher: the working folder is put back on the path by the kernel itself
    if sys.path and (sys.path[0] == "" or Path(sys.path[0]) == Path.cwd()):
        del sys.path[0]
    # ``from debugpy.server import api`` in ipykernel.debugger now raises ImportError, which
    # ipykernel reads as "no debugger installed"
    sys.modules["debugpy"] = None  # type: ignore[assignment]
    preload()
    from ipykernel import kernelapp

    kernelapp.launch_new_instance()


if __name__ == "__main__":  # pragma: no cover
    main()
