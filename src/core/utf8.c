#include "utf8.h"

#include <stdio.h>
#include <string.h>

size_t utf8_char_len(const char *s, size_t len)
{
    const unsigned char *u = (const unsigned char *)s;
    if (len == 0)
        return 0;
    unsigned c = u[0];
    if (c < 0x80)
        return 1;
    size_t n;
    unsigned min, cp;
    if (c >= 0xc2 && c <= 0xdf) {
        n = 2;
        min = 0x80;
        cp = c & 0x1f;
    } else if (c >= 0xe0 && c <= 0xef) {
        n = 3;
        min = 0x800;
        cp = c & 0x0f;
    } else if (c >= 0xf0 && c <= 0xf4) {
        n = 4;
        min = 0x10000;
        cp = c & 0x07;
    } else {
        return 0; /* a continuation byte, an overlong lead (C0, C1) or beyond U+10FFFF */
    }
    if (len < n)
        return 0;
    for (size_t k = 1; k < n; k++) {
        if ((u[k] & 0xc0) != 0x80)
            return 0;
        cp = (cp << 6) | (u[k] & 0x3f);
    }
    if (cp < min || cp > 0x10ffff || (cp >= 0xd800 && cp <= 0xdfff))
        return 0;
    return n;
}

int utf8_valid(const char *s, size_t len)
{
    for (size_t k = 0; k < len;) {
        size_t n = utf8_char_len(s + k, len - k);
        if (n == 0 || s[k] == '\0')
            return 0;
        k += n;
    }
    return 1;
}

int utf8_repair(char *dst, size_t cap, const char *src, size_t len)
{
    static const char fffd[] = "\xef\xbf\xbd";
    size_t out = 0;
    for (size_t k = 0; k < len;) {
        size_t n = utf8_char_len(src + k, len - k);
        const char *piece = n ? src + k : fffd;
        size_t plen = n ? n : 3;
        if (out + plen + 1 > cap) {
            dst[out] = '\0';
            return 1;
        }
        memcpy(dst + out, piece, plen);
        out += plen;
        k += n ? n : 1;
    }
    dst[out] = '\0';
    return 0;
}

char *utf8_printable(char *dst, size_t cap, const char *src)
{
    size_t out = 0, len = strlen(src);
    for (size_t k = 0; k < len;) {
        char esc[8];
        const char *piece = src + k;
        size_t n = utf8_char_len(src + k, len - k), plen = n;
        unsigned char c = (unsigned char)src[k];
        /* C1 controls are U+0080..U+009F, encoded C2 80..C2 9F */
        int c1 = n == 2 && c == 0xc2 && (unsigned char)src[k + 1] < 0xa0;
        if (n == 0 || c < 0x20 || c == 0x7f || c1 || c == '\\') {
            unsigned char b = c1 ? (unsigned char)src[k + 1] : c;
            if (c == '\n')
                snprintf(esc, sizeof esc, "\\n");
            else if (c == '\t')
                snprintf(esc, sizeof esc, "\\t");
            else if (c == '\r')
                snprintf(esc, sizeof esc, "\\r");
            else if (c == 0x1b)
                snprintf(esc, sizeof esc, "\\e");
            else if (c == '\\')
                snprintf(esc, sizeof esc, "\\\\");
            else if (c1)
                snprintf(esc, sizeof esc, "\\u%04x", b);
            else
                snprintf(esc, sizeof esc, "\\x%02x", b);
            piece = esc;
            plen = strlen(esc);
            n = c1 ? 2 : 1;
        }
        if (out + plen + 1 > cap)
            break;
        memcpy(dst + out, piece, plen);
        out += plen;
        k += n;
    }
    dst[out] = '\0';
    return dst;
}
