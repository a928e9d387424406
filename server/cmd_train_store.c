/* weft train: writing the trained model as the next snapshot. The gate decides whether it
 * goes live (it must beat its baselines and may not fall more than a tolerance below the live
 * snapshot's key metric); the model part not trained in this run is carried over from the
 * live snapshot when the node table is unchanged. */
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "cmd_train.h"
#include "weft/snapshot.h"
#include "weft/store.h"

static const char *const part_names[3] = { NULL, "link", "labels" };
/* The same in sentences. */
static const char *const part_words[3] = { NULL, "link", "label" };

/* The key metric of each part (what the gate compares): name in metrics.test, and its label. */
static const char *const key_metric[3] = { NULL, "mrr", "accuracy" };
static const char *const key_label[3] = { NULL, "test MRR", "test accuracy" };

/* The record of part @p p of manifest @p m: its "models" entry, or for manifests written
 * before there was one, the top-level model and metrics when they describe that part. */
static json_t *part_record(const json_t *m, weft_snapshot_part p)
{
    json_t *rec = json_object_get(json_object_get(m, "models"), part_names[p]);
    if (rec)
        return json_incref(rec);
    if (!json_object_get(m, part_names[p]))
        return NULL;
    const char *kind = json_string_value(json_object_get(json_object_get(m, "model"), "kind"));
    bool is_labels = kind && !strcmp(kind, "gcn");
    if (is_labels != (p == WEFT_SNAPSHOT_LABELS))
        return NULL;
    return json_pack("{s:O, s:O}", "model", json_object_get(m, "model"), "metrics",
                     json_object_get(m, "metrics"));
}

static double key_value(const json_t *rec, weft_snapshot_part p)
{
    json_t *v = json_object_get(json_object_get(json_object_get(rec, "metrics"), "test"),
                                key_metric[p]);
    return json_is_number(v) ? json_number_value(v) : NAN;
}

/* Gate one trained part against the live snapshot's record of it (NULL: none). Appends its
 * check to @p checks; on failure writes the reason into @p reason (if still empty). */
static bool gate_part(const json_t *mine, const json_t *live, weft_snapshot_part p,
                      double tolerance, json_t *checks, char *reason, size_t cap)
{
    json_t *beats_j = json_object_get(json_object_get(mine, "metrics"), "beats_baselines");
    bool beats = json_is_true(beats_j);
    double value = key_value(mine, p), live_value = live ? key_value(live, p) : NAN;
    bool is_ok = beats;
    char why[256] = "";
    if (!beats)
        snprintf(why, sizeof why, "the %s model does not beat its baselines on test",
                 part_words[p]);
    else if (!isnan(live_value) && !(value >= live_value - tolerance)) {
        is_ok = false;
        snprintf(why, sizeof why, "%s %.4f is more than %g below the live snapshot's %.4f",
                 key_label[p], value, tolerance, live_value);
    }
    /* A link model's index must find the exact top 10 often enough (include/weft/
     * link_index.h). */
    const json_t *index = json_object_get(mine, "index");
    double recall = json_number_value(json_object_get(index, "recall_at_10"));
    double floor = json_number_value(json_object_get(index, "recall_floor"));
    if (is_ok && index && !(recall >= floor)) {
        is_ok = false;
        snprintf(why, sizeof why, "the %s index's recall@10 %.4f against the exact scan is "
                 "below its floor %g", json_string_value(json_object_get(index, "kind")), recall,
                 floor);
    }
    json_t *c = json_pack("{s:s, s:s, s:f, s:b, s:b}", "part", part_names[p], "metric",
                          key_metric[p], "value", isnan(value) ? 0.0 : value,
                          "beats_baselines", beats, "passed", is_ok);
    if (c && !isnan(live_value))
        json_object_set_new(c, "live_value", json_real(live_value));
    if (c && index)
        json_object_set_new(c, "index_recall_at_10", json_real(recall));
    if (c && !is_ok)
        json_object_set_new(c, "reason", json_string(why));
    json_array_append_new(checks, c);
    if (!is_ok && !reason[0])
        snprintf(reason, cap, "%s", why);
    return is_ok;
}

/* The live snapshot, or NULL when there is none (or it cannot be opened: then it is as if
 * there were none, with a warning, so that a damaged live snapshot never blocks a fix). */
static weft_snapshot *open_live(weft_store *s, uint64_t *live)
{
    weft_error err;
    weft_snapshot *snap = NULL;
    uint64_t prev;
    if (weft_store_head(s, live, &prev, &err) != WEFT_OK || *live == 0)
        return NULL;
    if (weft_snapshot_open(s, *live, &snap, &err) != WEFT_OK) {
        fprintf(stderr, "weft: warning: the live snapshot %llu cannot be read (%s): no "
                        "comparison, nothing carried over\n", (unsigned long long)*live,
                err.msg);
        return NULL;
    }
    return snap;
}

/* What the write needs: the trained blobs' writer, and the parts to carry over. */
struct store_job {
    weft_store *store;
    cmd_train_put_fn put;
    void *ctx;
    const weft_types *types;       /* written with the node table; NULL: none */
    uint64_t live;                 /* 0: nothing to carry */
    bool carry[3];                 /* by weft_snapshot_part */
    json_t *carried[3];            /* their manifest records (owned) */
};

/* A weft_store_put_fn: the trained blobs, then the carried parts straight from the live
 * snapshot, opened here so that the store may grow its map between attempts. */
static weft_err put_all(void *ctx, weft_store_writer *w, json_t *manifest, weft_error *err)
{
    struct store_job *job = ctx;
    weft_err rc = job->put(job->ctx, w, manifest, err);
    if (rc == WEFT_OK && job->types)
        rc = weft_snapshot_put_types(w, manifest, job->types, err);
    json_t *models = json_object_get(manifest, "models");
    const char *it;
    json_t *rec;
    json_object_foreach(models, it, rec)
        if (!json_object_get(rec, "carried_from"))
            json_object_set_new(rec, "trained_in",
                                json_integer((json_int_t)weft_store_writer_version(w)));
    if (rc != WEFT_OK || !(job->carry[WEFT_SNAPSHOT_LINK] || job->carry[WEFT_SNAPSHOT_LABELS]))
        return rc;
    weft_snapshot *live = NULL;
    if ((rc = weft_snapshot_open(job->store, job->live, &live, err)) != WEFT_OK)
        return rc;
    for (int p = WEFT_SNAPSHOT_LINK; rc == WEFT_OK && p <= WEFT_SNAPSHOT_LABELS; p++) {
        if (!job->carry[p])
            continue;
        rc = weft_snapshot_copy_part(w, live, p, manifest, err);
        if (rc == WEFT_OK && json_object_set(models, part_names[p], job->carried[p]))
            rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory carrying a model over");
    }
    weft_snapshot_release(live);
    return rc;
}

/* Decide what to carry over from @p live: the part this run did not train, when the node
 * table is unchanged (else it is dropped, with a notice). */
static weft_err plan_carry(struct store_job *job, const weft_snapshot *live, const weft_graph *g,
                           json_t *models, weft_error *err)
{
    for (int p = WEFT_SNAPSHOT_LINK; p <= WEFT_SNAPSHOT_LABELS; p++) {
        if (json_object_get(models, part_names[p]) || !weft_snapshot_has_part(live, p))
            continue;
        if (!weft_snapshot_same_nodes(live, &g->nodes)) {
            fflush(stdout);
            fprintf(stderr, "weft: notice: the live snapshot %llu's %s model is dropped: its "
                            "node table differs from this run's (retrain it on the new "
                            "graph)\n", (unsigned long long)job->live, part_words[p]);
            continue;
        }
        json_t *rec = part_record(weft_snapshot_manifest(live), p);
        json_t *copy = rec ? json_deep_copy(rec) : json_object();
        json_decref(rec);
        if (!copy || (!json_object_get(copy, "carried_from") &&
                      json_object_set_new(copy, "carried_from",
                                          json_integer((json_int_t)job->live)))) {
            json_decref(copy);
            return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory carrying a model over");
        }
        job->carry[p] = true;
        job->carried[p] = copy;
        printf("the live snapshot %llu's %s model is carried over (same node table)\n",
               (unsigned long long)job->live, part_words[p]);
    }
    return WEFT_OK;
}

weft_err cmd_train_store(const struct train_opts *o, const weft_graph *g, json_t *manifest,
                         cmd_train_put_fn put, void *ctx, cmd_train_outcome *out,
                         weft_error *err)
{
    struct store_job job = { .put = put, .ctx = ctx };
    if (o->types && o->types->n_typed)
        job.types = o->types;
    weft_snapshot *live = NULL;
    json_t *models = json_object_get(manifest, "models");
    json_t *gate = json_pack("{s:b, s:f, s:[]}", "passed", true, "tolerance",
                             o->gate_tolerance, "checks");
    memset(out, 0, sizeof *out);
    weft_err rc = WEFT_OK;
    if (!json_is_object(models) || !gate) {
        rc = weft_error_set(err, WEFT_ERR_INVALID, "internal: manifest without models");
        goto done;
    }
    if ((rc = weft_store_open(o->store, WEFT_STORE_CREATE, 0, &job.store, err)) != WEFT_OK)
        goto done;
    live = open_live(job.store, &job.live);

    /* The gate: every part trained in this run must pass. */
    bool passed = true;
    for (int p = WEFT_SNAPSHOT_LINK; p <= WEFT_SNAPSHOT_LABELS; p++) {
        json_t *mine = json_object_get(models, part_names[p]);
        if (!mine)
            continue;
        json_t *theirs = live ? part_record(weft_snapshot_manifest(live), p) : NULL;
        passed &= gate_part(mine, theirs, p, o->gate_tolerance,
                            json_object_get(gate, "checks"), out->reason, sizeof out->reason);
        json_decref(theirs);
    }
    json_object_set_new(gate, "passed", json_boolean(passed));
    if (live)
        json_object_set_new(gate, "compared_with", json_integer((json_int_t)job.live));
    if (!passed) {
        json_object_set_new(gate, "reason", json_string(out->reason));
        if (o->is_force)
            json_object_set_new(gate, "forced", json_true());
    }
    if (json_object_set(manifest, "gate", gate)) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing the manifest");
        goto done;
    }
    if (live && (rc = plan_carry(&job, live, g, models, err)) != WEFT_OK)
        goto done;
    /* No snapshot may stay open while the store writes: it may have to grow its map. */
    weft_snapshot_release(live);
    live = NULL;

    out->is_live = (passed || o->is_force) && !o->is_no_promote;
    out->is_rejected = !passed && !o->is_force;
    out->is_forced = !passed && o->is_force && out->is_live;
    weft_store_state state = out->is_live ? WEFT_STORE_STATE_LIVE
                           : out->is_rejected ? WEFT_STORE_STATE_REJECTED
                                              : WEFT_STORE_STATE_STAGED;
    weft_store_change how = { passed ? NULL : out->reason, out->is_forced };
    rc = weft_store_write(job.store, put_all, &job, manifest, state, &how, &out->version, err);
done:
    weft_snapshot_release(live);
    weft_store_close(job.store);
    for (int p = WEFT_SNAPSHOT_LINK; p <= WEFT_SNAPSHOT_LABELS; p++)
        json_decref(job.carried[p]);
    json_decref(gate);
    return rc;
}

weft_err cmd_train_types_load(const struct train_opts *o, const weft_graph *g, weft_error *err)
{
    if (!o->types_file || !o->types)
        return WEFT_OK;
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_err rc = weft_types_load(o->types_file, &nodes, o->types, err);
    if (rc != WEFT_OK)
        return rc;
    printf("types: %zu of %zu nodes typed, %zu types\n", o->types->n_typed, g->nodes.n,
           o->types->names.n);
    return WEFT_OK;
}

int cmd_train_report_outcome(const struct train_opts *o, const cmd_train_outcome *oc)
{
    if (oc->is_live) {
        printf("\nsnapshot %llu written to %s and promoted: it is live%s\n",
               (unsigned long long)oc->version, o->store,
               oc->is_forced ? " (forced past the gate)" : "");
        if (oc->is_forced)
            printf("the gate would have refused it: %s\n", oc->reason);
        return CMD_OK;
    }
    if (oc->is_rejected) {
        printf("\nsnapshot %llu written to %s as rejected: %s\nthe live snapshot is unchanged; "
               "--force promotes anyway, --gate-tolerance X loosens the comparison\n",
               (unsigned long long)oc->version, o->store, oc->reason);
        return CMD_REJECTED;
    }
    printf("\nsnapshot %llu written to %s as staged (--no-promote)\n",
           (unsigned long long)oc->version, o->store);
    return CMD_OK;
}
