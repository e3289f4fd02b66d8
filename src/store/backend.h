/* backend: what a store backend gives store.c, which dispatches store.h's
 * functions to it. Internal to src/store.
 *
 * Each backend defines its own struct store_impl (store.c never looks
 * inside) and one const struct store_ops with every function below; the
 * functions mean what their store_* namesakes in store.h say. A backend's
 * messages name the database by the masked name it is given (never a
 * password). */
#ifndef PB_STORE_BACKEND_H
#define PB_STORE_BACKEND_H

#include "store.h"

struct store_impl;

struct store_ops {
    const char *name; /* "sqlite", "postgresql" */
    /* shown: the database as messages name it (masked) */
    enum pb_code (*open)(const char *db, const char *shown, enum store_mode mode, double wait_s,
                         void (*on_wait)(void *ctx, double wait_s), void *ctx,
                         struct store_impl **out, struct pb_error *err);
    void (*close)(struct store_impl *st);
    int (*schema_version)(struct store_impl *st);
    int (*schema_version_found)(struct store_impl *st);
    enum pb_code (*pack_add)(struct store_impl *st, struct pack_rec *p, struct pb_error *err);
    enum pb_code (*pack_get)(struct store_impl *st, const char *label, struct pack_rec *out,
                             struct pb_error *err);
    enum pb_code (*pack_list)(struct store_impl *st, struct pack_rec **out, size_t *n,
                              struct pb_error *err);
    /* retired_at NULL: back in service (reason NULL too) */
    enum pb_code (*pack_set_retired)(struct store_impl *st, int64_t id, const char *retired_at,
                                     const char *reason, struct pb_error *err);
    enum pb_code (*pack_by_id)(struct store_impl *st, int64_t id, struct pack_rec *out,
                               struct pb_error *err);
    enum pb_code (*pack_update)(struct store_impl *st, const struct pack_rec *p,
                                struct pb_error *err);
    enum pb_code (*flights_analysed_otherwise)(struct store_impl *st, int64_t pack_id, int cells,
                                               const char *chemistry, size_t *n,
                                               struct pb_error *err);
    enum pb_code (*flight_put)(struct store_impl *st, const struct flight_rec *f,
                               const char *report_json, struct store_dup *dup,
                               struct pb_error *err);
    enum pb_code (*flight_find_hash)(struct store_impl *st, const char *content_hash, int *found,
                                     int64_t *id, char *label, size_t cap, struct pb_error *err);
    enum pb_code (*flights_of)(struct store_impl *st, int64_t pack_id, struct flight_rec **out,
                               size_t *n, struct pb_error *err);
    enum pb_code (*flight_report)(struct store_impl *st, int64_t flight_id, char **out,
                                  struct pb_error *err);
    enum pb_code (*flight_get)(struct store_impl *st, int64_t id, struct flight_rec *out,
                               struct pb_error *err);
    enum pb_code (*flight_analysed_as)(struct store_impl *st, int64_t id, int *cells,
                                       char *chemistry, size_t cap, struct pb_error *err);
    enum pb_code (*flight_remove)(struct store_impl *st, int64_t id, struct pb_error *err);
    enum pb_code (*flight_move)(struct store_impl *st, int64_t id, int64_t to_pack_id,
                                struct pb_error *err);
    enum pb_code (*acks_of)(struct store_impl *st, int64_t pack_id, struct flight_ack **out,
                            size_t *n, struct pb_error *err);
    /* the label of flight id's pack into label; *found 0 when there is no such flight */
    enum pb_code (*flight_label)(struct store_impl *st, int64_t id, char *label, size_t cap,
                                 int *found, struct pb_error *err);
    /* stores (or replaces) the acknowledgement of flight_id */
    enum pb_code (*ack_put)(struct store_impl *st, int64_t flight_id, const char *note,
                            const char *acked_at, struct pb_error *err);
    enum pb_code (*pairs_list)(struct store_impl *st, struct pair_rec **out, size_t *n,
                               struct pb_error *err);
    /* how many registered pairs hold pack lo or hi */
    enum pb_code (*pairs_busy)(struct store_impl *st, int64_t lo, int64_t hi, int64_t *busy,
                               struct pb_error *err);
    /* registers lo < hi as a pair */
    enum pb_code (*pair_put)(struct store_impl *st, int64_t lo, int64_t hi, const char *created_at,
                             struct pb_error *err);
    enum pb_code (*pair_remove)(struct store_impl *st, const struct pack_rec *p, int *removed,
                                struct pb_error *err);
    enum pb_code (*assessments_list)(struct store_impl *st, struct assessment_rec **out, size_t *n,
                                     struct pb_error *err);
    enum pb_code (*history_gen)(struct store_impl *st, int64_t pack_id, int64_t *gen,
                                struct pb_error *err);
    enum pb_code (*assessment_put)(struct store_impl *st, int64_t pack_id, int64_t history_gen,
                                   const char *inputs_key, const char *assessment,
                                   struct pb_error *err);
};

/* Now as ISO 8601 UTC (what the tables' *_at columns hold), into buf. */
void store_now_iso(char *buf, size_t cap);

extern const struct store_ops store_sqlite_ops;
extern const struct store_ops store_pg_ops;

#endif
