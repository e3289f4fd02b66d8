#include "jsonout.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "../core/isotime.h"
#include "../core/utf8.h"

json_t *jout_num(double x)
{
    return isfinite(x) ? json_real(x) : json_null();
}

json_t *jout_str(const char *s)
{
    if (!s || !*s)
        return json_null();
    size_t len = strlen(s);
    if (utf8_valid(s, len))
        return json_stringn(s, len);
    /* jansson refuses invalid UTF-8 (it returns NULL): repair, never drop */
    char *fixed = malloc(3 * len + 1);
    if (!fixed)
        return NULL;
    utf8_repair(fixed, 3 * len + 1, s, len);
    json_t *j = json_string(fixed);
    free(fixed);
    return j;
}

/* A member or element that could not be made (NULL value, or jansson said no)
 * leaves this key behind; no text can make it (keys come from the code), and
 * jout_write refuses a document that holds it. */
#define JOUT_BROKEN "\x01jout: a value could not be made"

int jout_set(json_t *o, const char *key, json_t *v)
{
    if (v && o && json_object_set_new(o, key, v) == 0)
        return 0;
    if (v && !o)
        json_decref(v);
    if (o)
        json_object_set_new(o, JOUT_BROKEN, json_null());
    return -1;
}

int jout_append(json_t *a, json_t *v)
{
    if (v && a && json_array_append_new(a, v) == 0)
        return 0;
    if (v && !a)
        json_decref(v);
    if (a)
        json_array_append_new(a, json_pack("{s:n}", JOUT_BROKEN));
    return -1;
}

static int broken(const json_t *j)
{
    if (json_is_object(j)) {
        if (json_object_get(j, JOUT_BROKEN))
            return 1;
        const char *k;
        json_t *v;
        json_object_foreach((json_t *)j, k, v) if (broken(v)) return 1;
    } else if (json_is_array(j)) {
        for (size_t k = 0; k < json_array_size(j); k++)
            if (broken(json_array_get(j, k)))
                return 1;
    }
    return 0;
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
    if (broken(o)) {
        json_decref(o);
        return -1;
    }
    int rc = json_dumpf(o, out, JSON_INDENT(2) | JSON_REAL_PRECISION(10) | JSON_PRESERVE_ORDER);
    json_decref(o);
    return rc != 0 || fputc('\n', out) == EOF ? -1 : 0;
}
