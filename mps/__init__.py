"""chargewise engine: U(1) block-sparse tensors, matrix-product states, ground-state sweeps,
charge-resolved entanglement and the pipeline that drives them from a YAML file.

One sub-package per layer, each importing only those below it: ``blocks`` (charges and
block-sparse tensors) < ``chain`` (local spaces, operators, states) < ``solver`` (sweeps) <
``analysis`` (resolved entanglement, correlations) < ``theory`` (exact free fields, field theory)
< ``models`` (the top-level package of lattice families) < ``pipeline`` (files and commands).
"""

import ctypes
import os

# OpenBLAS keeps its worker threads spinning for 2^28 cycles (~0.1 s) after every BLAS call, so
# they take a core from the per-sector factorisations that follow the Lanczos products and run
# side by side (mps.blocks.cores). 2^20 cycles (~0.3 ms) still covers the gaps between the
# products of one operator application. Measured on the 2-core development machine, SVD time of
# a bond-128 / 256 / 512 sweep: 0.41 / 1.6-2.0 / 6.8 s -> 0.33 / 0.84 / 3.2 s, the products
# unchanged (2^14 cycles made the bond-128 products 10 % slower). It only takes effect when set
# before numpy first loads OpenBLAS; a value the user has set is kept.
os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "20")


def _keep_freed_memory() -> None:
    """Let glibc keep freed arrays for reuse instead of handing them back to the kernel.

    By default glibc maps every block above 128 kB afresh and unmaps it when freed (raising that
    threshold only as such blocks are freed), and gives a free heap top above 128 kB back, so the
    first sweep at a large bond touches about a gigabyte of fresh pages, each faulted in and
    zeroed by the kernel. Blocks up to 32 MB (glibc's limit) now come from the heap, and up to
    256 MB of free heap top is kept. Measured on the 2-core development machine, first sweep at
    bond 256 (100 sites): 225 000 -> 31 000 page faults, 0.50 -> 0.12 s of kernel time. Not applied
    where the C library has no ``mallopt`` or the user tunes malloc through the environment.
    """
    if "malloc" in os.environ.get("GLIBC_TUNABLES", "") or any(k.startswith("MALLOC_") for k in os.environ):
        return
    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    m_trim_threshold, m_mmap_threshold = -1, -3
    mallopt(m_mmap_threshold, 32 << 20)
    mallopt(m_trim_threshold, 256 << 20)


_keep_freed_memory()

__version__ = "0.1.0"
