/* stage: where an analysis is, told to whoever asked, so that its stages
 * can be timed from outside the core (bench/stages: PACKBOOK_STAGES).
 *
 * Owns nothing. A hook is called in the analysing thread as each stage
 * begins, with a fixed label; a NULL hook costs one test per stage. */
#ifndef PB_STAGE_H
#define PB_STAGE_H

struct stage_hook {
    void (*fn)(void *ctx, const char *stage);
    void *ctx;
};

static inline void stage_begin(const struct stage_hook *h, const char *stage)
{
    if (h && h->fn)
        h->fn(h->ctx, stage);
}

#endif
