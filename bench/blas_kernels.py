"""numpy's OpenBLAS kernels made the same as gloam's (not a test).

Where OpenBLAS has fallen back to its SSE3 kernels ("Prescott") on a processor
newer than itself and OPENBLAS_CORETYPE is unset, gloam sets the variable to
its AVX-512 (SkylakeX) or AVX2 (Haswell) kernels and starts again
(src/cli/main.c). A benchmark that times numpy beside gloam calls
same_kernels_as_gloam() before it imports numpy, so that both sides run the
same BLAS kernels: the same rule, then this script started again with the
variable set. A variable set by the user is left alone on both sides.
"""
import ctypes
import os
import sys

SKYLAKEX = {"avx512f", "avx512cd", "avx512bw", "avx512dq", "avx512vl"}


def same_kernels_as_gloam():
    if "OPENBLAS_CORETYPE" in os.environ:
        return
    try:
        lib = ctypes.CDLL("libopenblas.so.0")
    except OSError:
        return
    lib.openblas_get_corename.restype = ctypes.c_char_p
    if lib.openblas_get_corename().decode().lower() != "prescott":
        return
    flags = set()
    with open("/proc/cpuinfo") as f:
        for line in f:
            if line.startswith("flags"):
                flags = set(line.split(":", 1)[1].split())
                break
    if SKYLAKEX <= flags:
        want = "SkylakeX"
    elif {"avx2", "fma"} <= flags:
        want = "Haswell"
    else:
        return
    os.environ["OPENBLAS_CORETYPE"] = want
    sys.stdout.flush()
    os.execv(sys.executable, [sys.executable, *sys.argv])
