#include "dlfuncs.h"

#include <dlfcn.h>
#include <stdio.h>

int dl_funcs_load(const char *lib, const struct dl_func *f, size_t n, void **handle, char *why,
                  size_t cap)
{
    void *h = dlopen(lib, RTLD_NOW | RTLD_LOCAL);
    if (!h) {
        snprintf(why, cap, "%s", dlerror());
        return -1;
    }
    for (size_t k = 0; k < n; k++)
        if (!(*f[k].slot = dlsym(h, f[k].name))) {
            snprintf(why, cap, "%s has no %s", lib, f[k].name);
            dlclose(h);
            return -1;
        }
    *handle = h;
    return 0;
}
