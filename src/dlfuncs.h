/* dlfuncs: a shared library loaded when first needed (dlopen), not linked,
 * its functions looked up into a table of the caller's.
 *
 * Owns nothing: a library once loaded is kept for the process's life, as a
 * linked one would be (the store's libpq, the figures' cairo). */
#ifndef PB_DLFUNCS_H
#define PB_DLFUNCS_H

#include <stddef.h>

/* One function: its name and where its address goes. */
struct dl_func {
    const char *name;
    void **slot;
};

/* Opens lib (a soname) and fills the n slots; 0 with *handle set, or -1
 * with the reason in why (dlopen's message, or which function the library
 * lacks) and the library closed again. */
int dl_funcs_load(const char *lib, const struct dl_func *f, size_t n, void **handle, char *why,
                  size_t cap);

#endif
