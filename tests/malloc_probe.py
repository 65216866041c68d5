"""Shared by the tests of glibc's malloc behaviour: what a probe process runs after its own set-up.

Reference: glibc's mallinfo2(3) (from memory): ``fordblks`` is the free memory the heap keeps.
"""

#: Python source: frees a touched 20 MiB numpy block, then prints the heap's kept free memory in MiB.
#: 20 MiB is above glibc's starting threshold of 128 KiB and below the raised ones (31 and 32 MiB).
FREED_BLOCK_KEPT_MIB = """
import ctypes
import numpy as np

class Info(ctypes.Structure):
    _fields_ = [(name, ctypes.c_size_t) for name in
                ("arena", "ordblks", "smblks", "hblks", "hblkhd", "usmblks", "fsmblks", "uordblks", "fordblks",
                 "keepcost")]

libc = ctypes.CDLL(None)
libc.mallinfo2.restype = Info
block = np.ones(20 << 17)
del block
print(libc.mallinfo2().fordblks >> 20)
"""
