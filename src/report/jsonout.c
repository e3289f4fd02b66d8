#include "jsonout.h"

#include <math.h>

#include "../core/isotime.h"

json_t *jout_num(double x)
{
    return isfinite(x) ? json_real(x) : json_null();
}

json_t *jout_str(const char *s)
{
    return s && *s ? json_string(s) : json_null();
}

json_t *jout_date(double epoch_s)
{
    char buf[40];
    return isfinite(epoch_s) ? json_string(isotime_format(epoch_s, buf, sizeof buf)) : json_null();
}

int jout_write(FILE *out, json_t *o)
{
    if (!o)
        return -1;
    int rc = json_dumpf(o, out, JSON_INDENT(2) | JSON_REAL_PRECISION(10) | JSON_PRESERVE_ORDER);
    json_decref(o);
    return rc != 0 || fputc('\n', out) == EOF ? -1 : 0;
}
