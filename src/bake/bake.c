/* The bake driver: one target from scene to .brv file. */
#include "bake/bake.h"

#include <cJSON.h>
#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "bake/kernel.h"
#include "base/atomic_file.h"
#include "base/lds.h"
#include "base/sha256.h"
#include "base/threads.h"
#include "brume/brv_write.h"
#include "scene/light.h"
#include "voxel/bvh.h"
#include "voxel/grid.h"
#include "voxel/voxelize.h"

#ifndef BRUME_VERSION_STRING
#define BRUME_VERSION_STRING "0.1.0"
#endif

/* ---- channels ------------------------------------------------------------------------ */

enum { WORLD_CHANNELS = 17 };

static const char *const world_names[WORLD_CHANNELS] = {
    "extinction", "occupancy", "inscatter.r", "inscatter.g", "inscatter.b",
    "dir.r0", "dir.r1", "dir.r2", "dir.r3",
    "dir.g0", "dir.g1", "dir.g2", "dir.g3",
    "dir.b0", "dir.b1", "dir.b2", "dir.b3"};

static brv_encoding channel_encoding(brm_encoding e, uint32_t c)
{
    switch (e) {
    case BRM_ENCODING_F32: return BRV_ENCODING_F32;
    case BRM_ENCODING_COMPACT: return (c >= 2 && c <= 4) ? BRV_ENCODING_RGB9E5 : BRV_ENCODING_F16;
    default: return BRV_ENCODING_F16;
    }
}

static const char *world_units(uint32_t c)
{
    if (c == 0) return "1/m";
    if (c == 1) return "1";
    return "cd/m2/m";
}

/* ---- memory and work ------------------------------------------------------------------ */

uint64_t brm_default_memory_budget(void)
{
    long pages = sysconf(_SC_PHYS_PAGES), page = sysconf(_SC_PAGESIZE);
    if (pages <= 0 || page <= 0) return (uint64_t)4 << 30;
    return (uint64_t)pages * (uint64_t)page / 2;
}

static int effective_threads(const brm_bake_opts *o)
{
    return o->threads > 0 ? o->threads : brm_cpu_count();
}

static double min_cell_edge(const brm_grid *g)
{
    double e = g->cell.x;
    if (g->cell.y < e) e = g->cell.y;
    if (g->cell.z < e) e = g->cell.z;
    return e;
}

/* Bricks computed per batch before the writer drains them in order. */
static uint32_t batch_bricks(int threads) { return (uint32_t)threads * 4; }

uint64_t brm_bake_estimate_memory(const brm_scene *s, uint32_t t, const brm_bake_opts *o)
{
    brm_grid g;
    if (brm_grid_init(&g, &s->targets[t], NULL) != BRM_OK) return 0;
    uint64_t m = brm_voxelize_memory(&g);
    brm_shadow_opts so = {brm_grid_bounds(&g), min_cell_edge(&g), effective_threads(o), o->reference, NULL};
    m += brm_shadows_memory(s, &so);
    m += brm_bvh_memory(s);
    uint64_t brick_floats = (uint64_t)BRM_BRICK * BRM_BRICK * BRM_BRICK * WORLD_CHANNELS;
    m += (uint64_t)batch_bricks(effective_threads(o)) * brick_floats * sizeof(float);
    m += (uint64_t)brm_grid_brick_count(&g) * 64;   /* the writer's brick table */
    m += (uint64_t)24 << 20;                        /* zstd contexts, encode buffers, scene */
    brm_grid_free(&g);
    return m;
}

uint64_t brm_bake_estimate_work(const brm_scene *s, uint32_t t)
{
    const brm_target *tg = &s->targets[t];
    uint64_t cells = (uint64_t)tg->cells[0] * tg->cells[1] * tg->cells[2];
    return cells * tg->samples * (s->light_count + (s->sky.present ? 1 : 0));
}

/* ---- input hash and metadata ------------------------------------------------------------ */

static void hash_str(brm_sha256 *c, const char *tag, const char *v)
{
    brm_sha256_update(c, tag, strlen(tag) + 1);
    if (v) brm_sha256_update(c, v, strlen(v) + 1);
}

void brm_bake_input_hash(const brm_scene *s, uint32_t t, const brm_bake_opts *o, char hex[65])
{
    brm_sha256 c;
    brm_sha256_init(&c);
    hash_str(&c, "tool", BRUME_VERSION_STRING);
    hash_str(&c, "shared", s->shared_json_text);
    hash_str(&c, "target", s->targets[t].json_text);
    for (uint32_t i = 0; i < s->file_count; i++) {
        hash_str(&c, "file", s->files[i].path);
        brm_sha256_update(&c, s->files[i].sha256, 32);
    }
    hash_str(&c, "reference", o->reference ? "1" : "0");
    uint8_t dg[32];
    brm_sha256_final(&c, dg);
    brm_sha256_hex(dg, hex);
}

static char *build_metadata(const brm_scene *s, uint32_t t, const brm_bake_opts *o)
{
    const brm_target *tg = &s->targets[t];
    char hx[65], sh[65];
    brm_bake_input_hash(s, t, o, hx);
    uint8_t dg[32];
    brm_sha256_buf(s->shared_json_text ? s->shared_json_text : "", s->shared_json_text ? strlen(s->shared_json_text) : 0, dg);
    brm_sha256_hex(dg, sh);
    cJSON *m = cJSON_CreateObject();
    cJSON_AddStringToObject(m, "tool", "brume");
    cJSON_AddStringToObject(m, "tool_version", BRUME_VERSION_STRING);
    cJSON_AddStringToObject(m, "scene", s->name);
    cJSON_AddStringToObject(m, "target", tg->name);
    cJSON_AddStringToObject(m, "input_hash", hx);
    cJSON_AddStringToObject(m, "scene_hash", sh);
    cJSON *st = cJSON_AddObjectToObject(m, "settings");
    cJSON_AddNumberToObject(st, "samples", tg->samples);
    cJSON_AddBoolToObject(st, "reference", o->reference);
    static const char *enc[] = {"", "f32", "f16", "compact"};
    cJSON_AddStringToObject(st, "encoding", enc[tg->encoding < BRM_ENCODING_MAX_ENUM ? tg->encoding : 0]);
    cJSON_AddNumberToObject(st, "compression_level", tg->compression_level);
    cJSON *files = cJSON_AddArrayToObject(m, "files");
    for (uint32_t i = 0; i < s->file_count; i++) {
        cJSON *f = cJSON_CreateObject();
        char fh[65];
        brm_sha256_hex(s->files[i].sha256, fh);
        cJSON_AddStringToObject(f, "path", s->files[i].path);
        cJSON_AddStringToObject(f, "sha256", fh);
        cJSON_AddItemToArray(files, f);
    }
    char *text = cJSON_PrintUnformatted(m);
    cJSON_Delete(m);
    return text;
}

/* ---- the world baker ------------------------------------------------------------------ */

typedef struct world_job {
    const brm_scene *scene;
    const brm_target *target;
    const brm_grid *grid;
    const brm_occupancy *occ;
    brm_kernel kernel;
    uint64_t seed;
    uint32_t first;             /* first brick of the batch */
    float *buf;                 /* batch × brick floats */
    size_t brick_floats;
    uint32_t *light_lists;      /* per worker scratch: light indices */
    uint64_t *light_samples;    /* per worker counters */
    double (*sample_scratch)[3];/* per worker: BRM_MAX_CELL_SAMPLES points */
} world_job;

static void bake_world_brick(void *ctx, uint32_t item, int worker)
{
    world_job *j = ctx;
    const brm_grid *g = j->grid;
    uint32_t b = j->first + item;
    uint32_t lo[3], hi[3];
    brm_grid_brick_range(g, b, lo, hi);
    uint32_t nx = hi[0] - lo[0], ny = hi[1] - lo[1], nz = hi[2] - lo[2];
    size_t nc = (size_t)nx * ny * nz;
    float *out = j->buf + (size_t)item * j->brick_floats;

    /* Light culling: a light whose range or cone cannot reach the brick costs nothing here. */
    brm_aabb bb = {brm_grid_point(g, lo[0], lo[1], lo[2]), brm_grid_point(g, hi[0], hi[1], hi[2])};
    uint32_t *lights = j->light_lists + (size_t)worker * (j->scene->light_count + 1);
    uint32_t nl = 0;
    for (uint32_t l = 0; l < j->scene->light_count; l++)
        if (brm_light_reaches(&j->scene->lights[l], bb)) lights[nl++] = l;

    const uint32_t S = j->target->samples <= BRM_MAX_CELL_SAMPLES ? j->target->samples : BRM_MAX_CELL_SAMPLES;
    double (*u)[3] = j->sample_scratch + (size_t)worker * BRM_MAX_CELL_SAMPLES;
    uint64_t evals = 0;
    for (uint32_t k = lo[2]; k < hi[2]; k++)
        for (uint32_t jj = lo[1]; jj < hi[1]; jj++)
            for (uint32_t i = lo[0]; i < hi[0]; i++) {
                size_t gi = brm_grid_index(g, i, jj, k);
                size_t li = (size_t)(i - lo[0]) + nx * ((size_t)(jj - lo[1]) + ny * (size_t)(k - lo[2]));
                double occ = j->occ->fraction[gi];
                double free_frac = 1.0 - occ;
                double ext = 0.0, ins[3] = {0, 0, 0}, dir[3][4] = {{0}};
                if (free_frac > 0.0) {
                    brm_cell_samples(j->seed ^ (uint64_t)gi * 0x9e3779b97f4a7c15ull, S, u);
                    for (uint32_t sidx = 0; sidx < S; sidx++) {
                        brm_vec3 p = brm_grid_point(g, i + u[sidx][0], jj + u[sidx][1], k + u[sidx][2]);
                        brm_kernel_out ko;
                        brm_kernel_eval(&j->kernel, p, lights, nl, (uint32_t)(gi * S + sidx), NULL, &ko);
                        evals += ko.light_evals;
                        ext += ko.sigma_t;
                        for (int c = 0; c < 3; c++) {
                            ins[c] += ko.inscatter[c];
                            for (int m = 0; m < 4; m++) dir[c][m] += ko.dir[c][m];
                        }
                    }
                }
                /* Cell averages over the free part: solid parts carry no fog. */
                double w = free_frac / (double)S;
                out[0 * nc + li] = (float)(ext * w);
                out[1 * nc + li] = (float)occ;
                for (int c = 0; c < 3; c++) {
                    out[(2 + c) * nc + li] = (float)(ins[c] * w);
                    for (int m = 0; m < 4; m++) out[(5 + 4 * c + m) * nc + li] = (float)(dir[c][m] * w);
                }
            }
    j->light_samples[worker] += evals;
}

static brm_status writer_fail(brm_diag *d, const char *path, brv_writer *w, brv_result r)
{
    const char *detail = w ? brv_writer_error(w) : "";
    return brm_diag_error(d, r == BRV_E_UNREPRESENTABLE ? BRM_E_INPUT : BRM_E_IO, "%s: cannot write volume: %s%s%s",
                          path, brv_result_text(r), detail && *detail ? ": " : "", detail ? detail : "");
}

static brm_status bake_world(const brm_scene *s, uint32_t t, const brm_bake_opts *o, const char *out_path,
                             brm_bake_stats *stats, brm_diag *d)
{
    const brm_target *tg = &s->targets[t];
    const int threads = effective_threads(o);
    brm_status st;
    brm_grid g;
    if ((st = brm_grid_init(&g, tg, d)) != BRM_OK) return st;

    brm_occupancy occ = {0};
    brm_bvh *bvh = NULL;
    brm_shadow_set *ss = NULL;
    brv_writer *w = NULL;
    brm_atomic_file af = {0};
    float *buf = NULL;
    uint32_t *light_lists = NULL;
    uint64_t *light_samples = NULL;
    double (*scratch)[3] = NULL;
    char *meta = NULL;
    bool file_open = false;

    if ((st = brm_voxelize(s, &g, threads, &occ, d)) != BRM_OK) goto done;
    if (s->tri_count > 0 || s->object_count > 0) {
        if ((st = brm_bvh_build(s, &bvh, d)) != BRM_OK) goto done;
    }
    double t_shadow = brm_now();
    brm_shadow_opts so = {brm_grid_bounds(&g), min_cell_edge(&g), threads, o->reference, bvh};
    if ((st = brm_shadows_build(s, &so, &ss, d)) != BRM_OK) goto done;
    stats->shadow_seconds = brm_now() - t_shadow;

    brv_channel_desc ch[WORLD_CHANNELS];
    for (uint32_t c = 0; c < WORLD_CHANNELS; c++) {
        ch[c].name = world_names[c];
        ch[c].units = world_units(c);
        ch[c].encoding = channel_encoding(tg->encoding, c);
    }
    meta = build_metadata(s, t, o);
    brv_write_desc wd;
    memset(&wd, 0, sizeof wd);
    wd.kind = BRV_GRID_WORLD;
    for (int a = 0; a < 3; a++) wd.cells[a] = g.n[a];
    wd.brick_size = BRM_BRICK;
    wd.bounds_min[0] = g.box.min.x; wd.bounds_min[1] = g.box.min.y; wd.bounds_min[2] = g.box.min.z;
    wd.bounds_max[0] = g.box.max.x; wd.bounds_max[1] = g.box.max.y; wd.bounds_max[2] = g.box.max.z;
    wd.channel_count = WORLD_CHANNELS;
    wd.channels = ch;
    wd.compression_level = tg->compression_level;
    wd.metadata = meta;
    wd.metadata_len = meta ? strlen(meta) : 0;

    if ((st = brm_atomic_open(&af, out_path, d)) != BRM_OK) goto done;
    file_open = true;
    brv_result r = brv_writer_create(af.f, &wd, &w);
    if (r != BRV_OK) {
        st = writer_fail(d, out_path, w, r);
        goto done;
    }

    const uint32_t nbricks = brm_grid_brick_count(&g);
    const uint32_t batch = batch_bricks(threads);
    const size_t brick_floats = (size_t)BRM_BRICK * BRM_BRICK * BRM_BRICK * WORLD_CHANNELS;
    buf = malloc((size_t)batch * brick_floats * sizeof(float));
    light_lists = calloc((size_t)threads * (s->light_count + 1), sizeof *light_lists);
    light_samples = calloc((size_t)threads, sizeof *light_samples);
    scratch = malloc((size_t)threads * BRM_MAX_CELL_SAMPLES * sizeof *scratch);
    if (!buf || !light_lists || !light_samples || !scratch) {
        st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory for the brick buffers", tg->json_path);
        goto done;
    }
    world_job job = {s, tg, &g, &occ, {s, ss}, 0, 0, buf, brick_floats, light_lists, light_samples, scratch};
    /* Samples are keyed by the target's name, so two targets over the same cells differ but a
     * target always gets the same samples. */
    {
        uint8_t dg[32];
        brm_sha256_buf(tg->name, strlen(tg->name), dg);
        memcpy(&job.seed, dg, sizeof job.seed);
    }
    uint64_t cells_done = 0, total = brm_grid_cells(&g);
    for (uint32_t first = 0; first < nbricks; first += batch) {
        if (o->cancel && atomic_load(o->cancel)) {
            st = brm_diag_error(d, BRM_E_INTERRUPTED, "%s: interrupted", tg->name);
            goto done;
        }
        uint32_t n = nbricks - first < batch ? nbricks - first : batch;
        job.first = first;
        uint32_t ran = brm_parallel_for(n, threads, bake_world_brick, &job, o->cancel);
        if (ran != n) {
            st = brm_diag_error(d, BRM_E_INTERRUPTED, "%s: interrupted", tg->name);
            goto done;
        }
        for (uint32_t i = 0; i < n; i++) {
            r = brv_writer_put_brick(w, first + i, buf + (size_t)i * brick_floats);
            if (r != BRV_OK) {
                st = writer_fail(d, out_path, w, r);
                goto done;
            }
            uint32_t lo[3], hi[3];
            brm_grid_brick_range(&g, first + i, lo, hi);
            cells_done += (uint64_t)(hi[0] - lo[0]) * (hi[1] - lo[1]) * (hi[2] - lo[2]);
        }
        if (o->progress) o->progress(o->progress_user, cells_done, total);
    }
    r = brv_writer_finish(w);
    if (r != BRV_OK) {
        st = writer_fail(d, out_path, w, r);
        goto done;
    }
    long end = ftell(af.f);
    if ((st = brm_atomic_commit(&af, d)) != BRM_OK) {
        file_open = false;
        goto done;
    }
    file_open = false;
    stats->cells = total;
    stats->bytes = end > 0 ? (uint64_t)end : 0;
    for (int i = 0; i < threads; i++) stats->light_samples += light_samples[i];

done:
    if (file_open) brm_atomic_abort(&af);
    brv_writer_free(w);
    free(meta);
    free(buf);
    free(light_lists);
    free(light_samples);
    free(scratch);
    brm_shadows_free(ss);
    brm_bvh_free(bvh);
    brm_occupancy_free(&occ);
    brm_grid_free(&g);
    return st;
}

brm_status brm_bake_target(const brm_scene *s, uint32_t t, const brm_bake_opts *o, const char *out_path,
                           brm_bake_stats *stats, brm_diag *d)
{
    brm_bake_stats local;
    if (stats == NULL) stats = &local;
    memset(stats, 0, sizeof *stats);
    const brm_target *tg = &s->targets[t];
    uint64_t budget = o->max_memory ? o->max_memory : brm_default_memory_budget();
    uint64_t est = brm_bake_estimate_memory(s, t, o);
    stats->estimated_memory = est;
    if (est > budget) {
        /* Memory grows about linearly with cells: scale the count down to what fits. */
        uint64_t cells = (uint64_t)tg->cells[0] * tg->cells[1] * tg->cells[2];
        uint64_t fixed = (uint64_t)24 << 20;
        uint64_t fit = (budget > fixed && est > fixed) ? (uint64_t)((double)cells * (double)(budget - fixed) / (double)(est - fixed)) : 0;
        return brm_diag_error(d, BRM_E_BUDGET,
                              "%s: %s (\"%s\"): estimated peak memory %.1f MiB is over the budget of %.1f MiB; "
                              "about %llu cells would fit (this target has %llu): lower \"cells\" or raise --max-memory",
                              s->path, tg->json_path, tg->name, (double)est / 1048576.0, (double)budget / 1048576.0,
                              (unsigned long long)fit, (unsigned long long)cells);
    }
    double t0 = brm_now();
    brm_status st;
    switch (tg->grid) {
    case BRM_GRID_WORLD: st = bake_world(s, t, o, out_path, stats, d); break;
    default:
        st = brm_diag_error(d, BRM_E_INPUT, "%s: %s (\"%s\"): grid \"%s\" cannot be baked by this version yet",
                            s->path, tg->json_path, tg->name, tg->grid == BRM_GRID_FRUSTUM ? "frustum" : "probes");
        break;
    }
    stats->seconds = brm_now() - t0;
    return st;
}
