/* utf8: checking and repairing UTF-8 text (RFC 3629), and making text safe
 * to print on a terminal.
 *
 * Owns nothing; every function works on the caller's buffers. Valid means
 * RFC 3629: shortest form, no surrogates (U+D800..U+DFFF), at most U+10FFFF. */
#ifndef PB_UTF8_H
#define PB_UTF8_H

#include <stddef.h>

/* Length (1-4) of the valid UTF-8 character at s (len bytes available), or
 * 0 when the bytes there are not one. */
size_t utf8_char_len(const char *s, size_t len);

/* 1 when s[0..len) is valid UTF-8 and holds no NUL, else 0. */
int utf8_valid(const char *s, size_t len);

/* Copies src[0..len) into dst (cap bytes, NUL-terminated), each byte that is
 * not part of a valid character replaced by U+FFFD, and cut only at a
 * character boundary when it does not fit. Returns 1 when it had to cut,
 * else 0. cap must be at least 1. */
int utf8_repair(char *dst, size_t cap, const char *src, size_t len);

/* Copies text into dst (cap bytes) for a terminal: control characters
 * (C0 and DEL, C1 U+0080..U+009F) become \n, \t, \r, \e, \xHH or \u00HH, a
 * backslash becomes \\, invalid UTF-8 bytes \xHH; cut at a character
 * boundary when it does not fit. Returns dst. */
char *utf8_printable(char *dst, size_t cap, const char *src);

#endif
