"""A notebook kernel that runs on the interpreter wavetrail itself runs on.

Installed kernel specs often start ``python`` from PATH, which may be another
environment than the one running the workflow (an unactivated venv, a system
Python). The kernel manager below ignores installed specs and always starts
``sys.executable -m ipykernel_launcher``, so the report sees the same packages
as every other step.
"""

from __future__ import annotations

import sys

from jupyter_client.kernelspec import KernelSpec
from jupyter_client.manager import KernelManager
from traitlets import default

#: the name written into executed notebooks' ``metadata.kernelspec``
KERNEL_NAME = "wavetrail-python"
KERNEL_DISPLAY = "Python (wavetrail)"

#: environment of the kernel process: headless figures, fixed hash seed, quiet debugger
KERNEL_ENV = {
    "MPLBACKEND": "Agg",
    "PYTHONHASHSEED": "0",
    "PYDEVD_DISABLE_FILE_VALIDATION": "1",
}


def kernel_spec() -> KernelSpec:
    """The kernel spec of the current interpreter (``sys.executable``)."""
    return KernelSpec(
        argv=[sys.executable, "-Xfrozen_modules=off", "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        display_name=KERNEL_DISPLAY,
        language="python",
        env=dict(KERNEL_ENV),
        metadata={},
    )


class InterpreterKernelManager(KernelManager):
    """A kernel manager whose kernel is always :func:`kernel_spec`, whatever the name asked for.

    It talks to the kernel over local IPC sockets rather than TCP ports, so no
    port is opened and nothing is reachable from the network.
    """

    @default("transport")
    def _default_transport(self) -> str:
        return "ipc"

    @property
    def kernel_spec(self) -> KernelSpec:  # type: ignore[override]
        if self._kernel_spec is None:
            self._kernel_spec = kernel_spec()
        return self._kernel_spec
