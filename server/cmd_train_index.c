/* weft train: the approximate index of a link model (include/weft/link_index.h). Its flags,
 * their help, and building and measuring the index before the snapshot is stored, so that
 * the gate can judge its recall. */
#include <stdio.h>
#include <string.h>

#include "cmd_train.h"

#define SUB "train"

void cmd_train_index_help(void)
{
    weft_link_index_settings d = weft_link_index_defaults(WEFT_LINK_INDEX_IVF);
    weft_link_index_settings pq = weft_link_index_defaults(WEFT_LINK_INDEX_IVF_PQ);
    printf("the index of a link model (how the service finds the top k; every returned score\n"
           "is exact, the index only picks the candidates):\n"
           "  --index KIND       exact (every query scans every row), int8 (a quarter of the\n"
           "                     bytes scanned, then the best k x oversample re-scored), ivf\n"
           "                     (k-means lists of int8 codes; only the lists nearest the query\n"
           "                     are scanned) or ivf-pq (k-means lists of 4-bit product codes,\n"
           "                     a sixteenth of the bytes: for rows without cluster structure,\n"
           "                     where most lists must be scanned) (default exact)\n"
           "  --index-oversample N  candidates re-scored per result, 1 to 1000 (default %zu;\n"
           "                     ivf-pq %zu)\n"
           "  --index-lists N    ivf, ivf-pq: lists (default 4 sqrt(nodes); ivf-pq\n"
           "                     sqrt(nodes) / 2)\n"
           "  --index-nprobe N   ivf, ivf-pq: lists scanned per query (default: the smallest\n"
           "                     power of two reaching halfway from the floor to recall 1 on\n"
           "                     the probes)\n"
           "  --index-recall-floor X  the gate refuses an index whose recall@10 against the\n"
           "                     exact scan, on %d fixed probe queries, is below X (default %g)\n",
           d.oversample, pq.oversample, WEFT_LINK_INDEX_PROBES, d.recall_floor);
}

int cmd_train_index_parse(int argc, char **argv, int *i, struct train_opts *o, int *rc)
{
    bool bad = false;
    const char *v;
    uint64_t u;
    double x;
    *rc = CMD_OK;
    if ((v = cmd_opt_value(SUB, argc, argv, i, "--index", &bad)) || bad) {
        if (bad)
            *rc = CMD_USAGE;
        else if (!weft_link_index_kind_parse(v, &o->index.kind))
            *rc = cmd_usage_error(SUB, "--index: unknown value '%s' (known: exact, int8, ivf, "
                                  "ivf-pq)", v);
        else if (!o->is_oversample_given)
            o->index.oversample = weft_link_index_defaults(o->index.kind).oversample;
        return 1;
    }
    static const struct {
        const char *flag;
        uint64_t min, max;
    } counts[] = {
        { "--index-oversample", 1, 1000 },
        { "--index-lists", 1, UINT32_MAX },
        { "--index-nprobe", 1, UINT32_MAX },
    };
    for (size_t k = 0; k < sizeof counts / sizeof counts[0]; k++)
        if ((v = cmd_opt_value(SUB, argc, argv, i, counts[k].flag, &bad)) || bad) {
            if (bad || !cmd_parse_u64(SUB, counts[k].flag, v, counts[k].min, counts[k].max, &u))
                *rc = CMD_USAGE;
            else if (k == 0) {
                o->index.oversample = (size_t)u;
                o->is_oversample_given = true;
            } else if (k == 1)
                o->index.n_lists = (size_t)u;
            else
                o->index.nprobe = (size_t)u;
            o->is_index_tuned = true;
            return 1;
        }
    if ((v = cmd_opt_value(SUB, argc, argv, i, "--index-recall-floor", &bad)) || bad) {
        if (bad || !cmd_parse_double(SUB, "--index-recall-floor", v, 0.0, 1.0, &x))
            *rc = CMD_USAGE;
        else
            o->index.recall_floor = x;
        o->is_index_tuned = true;
        return 1;
    }
    return 0;
}

int cmd_train_index_check(const struct train_opts *o)
{
    if (o->index.kind != WEFT_LINK_INDEX_EXACT && o->task == CMD_TRAIN_GCN)
        return cmd_usage_error(SUB, "--index is for link models; --model gcn has none");
    if (o->is_index_tuned && o->index.kind == WEFT_LINK_INDEX_EXACT)
        return cmd_usage_error(SUB, "the --index-* settings need --index int8, ivf or ivf-pq");
    return CMD_OK;
}

weft_err cmd_train_index_build(const struct train_opts *o, const weft_link_model *m,
                               json_t *manifest, weft_link_index *out, weft_error *err)
{
    weft_link_index_settings s = o->index;
    s.seed = o->set.seed;
    s.n_threads = o->set.n_threads ? o->set.n_threads : cmd_online_cpus();
    weft_err rc = weft_link_index_build(m, &s, out, err);
    if (rc != WEFT_OK || out->kind == WEFT_LINK_INDEX_EXACT)
        return rc;
    char lists[96] = "";
    if (weft_link_index_is_clustered(out->kind))
        snprintf(lists, sizeof lists, ", %zu lists, %zu scanned per query", out->ivf.ivf.n_lists,
                 out->nprobe);
    printf("index: %s%s, oversample %zu: recall@10 %.4f against the exact scan on %zu probe "
           "queries (floor %g); built in %.2f s, %.1f MiB\n",
           weft_link_index_kind_name(out->kind), lists, out->oversample, out->recall,
           out->n_probes, out->recall_floor, out->build_seconds,
           (double)out->bytes / (1024.0 * 1024.0));
    json_t *link = json_object_get(json_object_get(manifest, "models"), "link");
    if (!json_is_object(link))
        return weft_error_set(err, WEFT_ERR_INVALID, "internal: manifest without a link model");
    if (json_object_set_new(link, "index", weft_link_index_json(out)))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory building the manifest");
    return WEFT_OK;
}
