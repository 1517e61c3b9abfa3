// libsprig_c.so: the whole C API of runtime/include/sprig/sprig.h in one shared library, for
// programs that load it at run time (bench/compare_torch.py through ctypes). The functions come
// from libsprig.a, linked in whole; this file only gives the library a source of its own.
#include "sprig/sprig.h"
