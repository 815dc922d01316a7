"""What the benchmarks record about the machine they ran on (shared by the bench scripts)."""

from __future__ import annotations

import os
import platform
import subprocess
import time


def machine() -> dict[str, str]:
    import numpy
    import scipy

    model = "unknown"
    with open("/proc/cpuinfo", encoding="ascii", errors="replace") as fh:
        for line in fh:
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    version = subprocess.run(["ngspice", "-v"], capture_output=True, text=True).stdout
    ngspice = next((ln.strip("* ").split(" ")[0] for ln in version.splitlines()
                    if "ngspice-" in ln), "?")
    package = subprocess.run(["dpkg-query", "-W", "-f=${Version}", "ngspice"],
                             capture_output=True, text=True).stdout.strip()
    if package:
        ngspice += f" (Debian package {package})"
    return {"date": time.strftime("%Y-%m-%d %H:%M"), "nproc": str(os.cpu_count()),
            "machine": platform.machine(), "cpu": model, "python": platform.python_version(),
            "numpy": numpy.__version__, "scipy": scipy.__version__, "ngspice": ngspice}
