// SPRIG_API marks what libsprig exports: the C API and the public C++ classes and functions.
// The library is built with hidden visibility, so anything not marked stays internal.
#pragma once

#if defined(_WIN32) || defined(__CYGWIN__)
// A DLL exports what it defines with SPRIG_API and its users import it; a static library
// (SPRIG_STATIC defined by its users and when building it) needs neither.
#if defined(SPRIG_STATIC)
#define SPRIG_API
#elif defined(SPRIG_BUILDING_LIBRARY)
#define SPRIG_API __declspec(dllexport)
#else
#define SPRIG_API __declspec(dllimport)
#endif
#else
#define SPRIG_API __attribute__((visibility("default")))
#endif
