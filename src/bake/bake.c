/* The bake driver: one target from scene to .brv file. */
#include "bake/bake.h"

#include <cJSON.h>
#include <errno.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "bake/kernel.h"
#include "bake/warnings.h"
#include "base/atomic_file.h"
#include "base/lds.h"
#include "base/sha256.h"
#include "base/threads.h"
#include "brume/brv_write.h"
#include "scene/light.h"
#include "voxel/bvh.h"
#include "voxel/grid.h"
#include "voxel/voxelize.h"

#include "bake/bake_internal.h"

#ifndef BRUME_VERSION_STRING
#define BRUME_VERSION_STRING "0.1.0"
#endif

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

/* What the shadow maps must cover: the target, and for probes everything their rays can
 * reach (bounce light is gathered on any surface, fog anywhere in the fog bounds). */
static brm_aabb lit_bounds(const brm_scene *s, const brm_grid *g)
{
    brm_aabb b = brm_grid_bounds(g);
    if (g->kind == BRM_GRID_PROBES) {
        brm_aabb_union(&b, s->fog_bounds);
        for (uint32_t i = 0; i < s->object_count; i++) brm_aabb_union(&b, s->objects[i].bounds);
    }
    return b;
}

static double min_cell_edge(const brm_grid *g)
{
    double e = g->cell.x;
    if (g->cell.y < e) e = g->cell.y;
    if (g->cell.z < e) e = g->cell.z;
    return e;
}

/* A frustum worker's froxel averages for one unit: a brick's x, y extent by every depth
 * slice and the near stretch, COL_FIELDS (5) doubles each. */
static size_t frustum_column_bytes(const brm_grid *g)
{
    return (size_t)BRM_BRICK * BRM_BRICK * ((size_t)g->n[2] + 1) * 5 * sizeof(double);
}

/* Samples a frustum worker evaluates light by light (one tile of 4x4x4 froxels at 4 samples),
 * and the scratch they take. */
enum { FRUSTUM_BATCH = 256 };
static size_t frustum_batch_bytes(void)
{
    return (size_t)FRUSTUM_BATCH * (sizeof(brm_kernel_view_sample) + sizeof(brm_media_point) + sizeof(double));
}

/* Samples a world worker evaluates light by light (64 cells at 4 samples), and their scratch. */
enum { WORLD_BATCH = 256 };
static size_t world_batch_bytes(void)
{
    return (size_t)WORLD_BATCH * (sizeof(brm_kernel_iso_sample) + sizeof(brm_media_point));
}

/* Bricks in flight for world and probe targets (the ring of brm_run_plan). */
static uint32_t batch_bricks(int threads) { return (uint32_t)threads * 4; }

/* Units in flight (the ring of unit buffers brm_run_plan computes into and writes from, in
 * order): four a thread (so a slow unit, a frustum column near the lights, leaves the other
 * threads room to compute ahead of the writer), as long as a thread's share stays within 32
 * bricks; at least one. */
static uint32_t batch_units(int threads, uint32_t bricks_per_unit)
{
    uint32_t per = bricks_per_unit == 0 ? 4 : 32 / bricks_per_unit;
    if (per > 4) per = 4;
    if (per < 1) per = 1;
    return (uint32_t)threads * per;
}


uint64_t brm_bake_estimate_memory(const brm_scene *s, uint32_t t, const brm_bake_opts *o)
{
    brm_grid g;
    if (brm_grid_init(&g, &s->targets[t], NULL) != BRM_OK) return 0;
    uint64_t m = brm_voxelize_memory(&g);
    brm_shadow_opts so = {lit_bounds(s, &g), min_cell_edge(&g), effective_threads(o), o->reference, NULL, false, 1.0};
    m += brm_shadows_memory(s, &so);
    m += brm_bvh_memory(s);
    if (g.kind == BRM_GRID_PROBES) m += brm_probes_memory(s, t, &g, o);
    /* The ring of unit buffers brm_run_plan computes into and writes from: four bricks a
     * thread, or for frustum targets up to four columns of bricks a thread (batch_units). */
    uint64_t unit_floats = (uint64_t)BRM_BRICK * BRM_BRICK * BRM_BRICK * 20;
    uint64_t units = batch_bricks(effective_threads(o));
    if (g.kind == BRM_GRID_FRUSTUM) {
        unit_floats *= g.bricks[2];
        units = batch_units(effective_threads(o), g.bricks[2]);
        m += (uint64_t)effective_threads(o) * (frustum_column_bytes(&g) + frustum_batch_bytes());
    }
    if (g.kind == BRM_GRID_WORLD) m += (uint64_t)effective_threads(o) * world_batch_bytes();
    m += units * unit_floats * sizeof(float);
    m += (uint64_t)brm_grid_brick_count(&g) * 64;   /* the writer's brick table */
    /* zstd's compression context at the levels used, encode buffers, the scene, the process:
     * measured about 8 MiB (bench/bench_memory.c). */
    m += (uint64_t)8 << 20;
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

/* A referenced file's path relative to the scene's folder, so the same scene baked from another
 * working folder gives the same hash and the same bytes. */
static const char *scene_relative(const brm_scene *s, const char *fp)
{
    const size_t dl = strlen(s->dir);
    if (dl && strncmp(fp, s->dir, dl) == 0 && fp[dl] == '/') return fp + dl + 1;
    return fp;
}

static void hash_str(brm_sha256 *c, const char *tag, const char *v)
{
    brm_sha256_update(c, tag, strlen(tag) + 1);
    if (v) brm_sha256_update(c, v, strlen(v) + 1);
}

/* What decides whether target t's output is up to date. Besides the tool version, the bake
 * revision (BRM_BAKE_REVISION), the scene's name, the target's own JSON, the settings and
 * every referenced file's content hash, it takes
 * the shared part of the scene (geometry, media, sky, fog bounds) without its "lights", plus the
 * canonical JSON of only those lights that can reach what t depends on (brm_target_lit_bounds,
 * in scene order): changing a light re-bakes exactly the targets it reaches. The resolved fog
 * bounds are hashed too, since without "fog_bounds" they follow every target's box. When the
 * shared text cannot be split (no "lights" array matching the scene), all of it is hashed. */
void brm_bake_input_hash(const brm_scene *s, uint32_t t, const brm_bake_opts *o, char hex[65])
{
    brm_sha256 c;
    brm_sha256_init(&c);
    hash_str(&c, "tool", BRUME_VERSION_STRING);
    char revision[16];
    snprintf(revision, sizeof revision, "%d", BRM_BAKE_REVISION);
    hash_str(&c, "revision", revision);
    hash_str(&c, "scene", s->name);
    /* cJSON's parser records errors in a global: several targets bake at once, so parses of
     * the shared text take turns (the hash is computed once per bake, the wait is short). */
    static atomic_flag parsing = ATOMIC_FLAG_INIT;
    while (atomic_flag_test_and_set(&parsing)) {
    }
    cJSON *shared = s->shared_json_text ? cJSON_Parse(s->shared_json_text) : NULL;
    atomic_flag_clear(&parsing);
    cJSON *lights = cJSON_IsObject(shared) ? cJSON_DetachItemFromObjectCaseSensitive(shared, "lights") : NULL;
    bool split = cJSON_IsObject(shared) && (lights ? cJSON_IsArray(lights) && cJSON_GetArraySize(lights) == (int)s->light_count
                                                   : s->light_count == 0);
    char *rest = split ? cJSON_PrintUnformatted(shared) : NULL;
    if (rest) {
        hash_str(&c, "shared-without-lights", rest);
        brm_aabb lb = brm_target_lit_bounds(s, t);
        const cJSON *lj = lights ? lights->child : NULL;
        for (uint32_t i = 0; i < s->light_count && lj; i++, lj = lj->next) {
            if (!brm_light_reaches(&s->lights[i], lb)) continue;
            char *text = cJSON_PrintUnformatted(lj);
            hash_str(&c, "light", text ? text : s->lights[i].json_path);
            cJSON_free(text);
        }
        cJSON_free(rest);
    } else {
        hash_str(&c, "shared", s->shared_json_text);
    }
    cJSON_Delete(lights);
    cJSON_Delete(shared);
    char fb[160];
    snprintf(fb, sizeof fb, "%.17g %.17g %.17g %.17g %.17g %.17g", s->fog_bounds.min.x, s->fog_bounds.min.y,
             s->fog_bounds.min.z, s->fog_bounds.max.x, s->fog_bounds.max.y, s->fog_bounds.max.z);
    hash_str(&c, "fog-bounds", fb);
    hash_str(&c, "target", s->targets[t].json_text);
    /* Files by content, named relative to the scene's folder so that the same scene baked from
     * another working folder stays up to date. */
    for (uint32_t i = 0; i < s->file_count; i++) {
        hash_str(&c, "file", scene_relative(s, s->files[i].path));
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
        cJSON_AddStringToObject(f, "path", scene_relative(s, s->files[i].path));
        cJSON_AddStringToObject(f, "sha256", fh);
        cJSON_AddItemToArray(files, f);
    }
    char *text = cJSON_PrintUnformatted(m);
    cJSON_Delete(m);
    return text;
}

/* ---- the driver: units of bricks, computed in parallel, written in order ---------------- */

/* The units run in one brm_parallel_for; each result goes to a ring of `slots` unit buffers
 * (unit u in slot u % slots). Whichever thread finds the next unit in file order ready writes
 * it, and every ready unit after it, while the other threads compute on: the writer's encoding
 * and compression overlap the computing instead of following each batch with the other threads
 * idle. The pool hands units out in order, so a thread that waits for its slot waits only on
 * units already running or ready to be written. Bricks reach the writer in unit order, one
 * thread at a time: the same bytes whatever the thread count. */
typedef struct run_ctx {
    const brm_plan *pl;
    const brm_grid *g;
    const brm_bake_opts *o;
    brv_writer *w;
    float *buf;
    size_t unit_floats, brick_floats;
    uint32_t slots;
    pthread_mutex_t mu;
    pthread_cond_t cv;
    unsigned char *ready;       /* per slot: its unit is computed, not yet written */
    uint32_t written;           /* units written, in order */
    bool writing;               /* a thread is writing (mu is released meanwhile) */
    brv_result failed;          /* the writer's first failure; BRV_OK while none */
    uint64_t cells_done, total;
} run_ctx;

/* With mu held: writes the ready units in order, unless another thread is doing so. */
static void drain_ready(run_ctx *r)
{
    if (r->writing) return;
    r->writing = true;
    const brm_plan *pl = r->pl;
    while (r->failed == BRV_OK && r->written < pl->unit_count && r->ready[r->written % r->slots]) {
        const uint32_t u = r->written;
        pthread_mutex_unlock(&r->mu);
        const float *src = r->buf + (size_t)(u % r->slots) * r->unit_floats;
        brv_result res = BRV_OK;
        uint64_t cells = 0;
        for (uint32_t i = 0; i < pl->bricks_per_unit && res == BRV_OK; i++) {
            uint32_t b = pl->brick_of(r->g, u, i), lo[3], hi[3];
            res = brv_writer_put_brick(r->w, b, src + (size_t)i * r->brick_floats);
            brm_grid_brick_range(r->g, b, lo, hi);
            cells += (uint64_t)(hi[0] - lo[0]) * (hi[1] - lo[1]) * (hi[2] - lo[2]);
        }
        pthread_mutex_lock(&r->mu);
        r->ready[u % r->slots] = 0;
        r->written = u + 1;
        r->cells_done += cells;
        if (res != BRV_OK)
            r->failed = res;
        else if (r->o->progress && (r->written % r->slots == 0 || r->written == pl->unit_count))
            r->o->progress(r->o->progress_user, r->cells_done, r->total);
        pthread_cond_broadcast(&r->cv);
    }
    r->writing = false;
}

static void run_unit(void *ctx, uint32_t u, int worker)
{
    run_ctx *r = ctx;
    pthread_mutex_lock(&r->mu);
    while (r->failed == BRV_OK && u >= r->written + r->slots) pthread_cond_wait(&r->cv, &r->mu);
    const bool skip = r->failed != BRV_OK;
    pthread_mutex_unlock(&r->mu);
    if (!skip) r->pl->compute(r->pl->ctx, u, worker, r->buf + (size_t)(u % r->slots) * r->unit_floats);
    pthread_mutex_lock(&r->mu);
    r->ready[u % r->slots] = 1;
    drain_ready(r);
    pthread_mutex_unlock(&r->mu);
}

uint32_t brm_plan_brick_is_unit(const brm_grid *g, uint32_t unit, uint32_t i)
{
    (void)g;
    (void)i;
    return unit;
}

static uint32_t brick_of_column(const brm_grid *g, uint32_t unit, uint32_t i)
{
    /* unit = bx + nbx·by; brick = bx + nbx·(by + nby·bz) */
    return unit + g->bricks[0] * g->bricks[1] * i;
}

static brm_status writer_fail(brm_diag *d, const char *path, brv_writer *w, brv_result r)
{
    const char *detail = w ? brv_writer_error(w) : "";
    return brm_diag_error(d, r == BRV_E_UNREPRESENTABLE ? BRM_E_INPUT : BRM_E_IO, "%s: cannot write volume: %s%s%s",
                          path, brv_result_text(r), detail && *detail ? ": " : "", detail ? detail : "");
}

void brm_plan_channel(brm_plan *pl, const char *name, const char *units, brv_encoding e)
{
    brv_channel_desc *c = &pl->channels[pl->channel_count++];
    c->name = name;
    c->units = units;
    c->encoding = e;
}

/* Encodes per the target's setting; triplet marks the r of an r,g,b colour triplet that the
 * compact encoding stores as rgb9e5. */
static brv_encoding enc_for(brm_encoding e, bool colour)
{
    if (e == BRM_ENCODING_F32) return BRV_ENCODING_F32;
    if (e == BRM_ENCODING_COMPACT && colour) return BRV_ENCODING_RGB9E5;
    return BRV_ENCODING_F16;
}

brm_status brm_run_plan(const brm_scene *s, uint32_t t, const brm_bake_opts *o, const brm_grid *g,
                           const brm_plan *pl, const char *out_path, brm_bake_stats *stats, brm_diag *d)
{
    const brm_target *tg = &s->targets[t];
    const int threads = effective_threads(o);
    brm_status st = BRM_OK;
    brv_writer *w = NULL;
    brm_atomic_file af;
    bool file_open = false, sync_ready = false;
    float *buf = NULL;
    run_ctx rc;
    memset(&rc, 0, sizeof rc);
    char *meta = build_metadata(s, t, o);

    brv_write_desc wd;
    memset(&wd, 0, sizeof wd);
    wd.kind = g->kind == BRM_GRID_WORLD ? BRV_GRID_WORLD : g->kind == BRM_GRID_FRUSTUM ? BRV_GRID_FRUSTUM : BRV_GRID_PROBES;
    for (int a = 0; a < 3; a++) wd.cells[a] = g->n[a];
    wd.brick_size = BRM_BRICK;
    wd.bounds_min[0] = g->box.min.x; wd.bounds_min[1] = g->box.min.y; wd.bounds_min[2] = g->box.min.z;
    wd.bounds_max[0] = g->box.max.x; wd.bounds_max[1] = g->box.max.y; wd.bounds_max[2] = g->box.max.z;
    if (g->kind == BRM_GRID_FRUSTUM) {
        const brm_camera *c = &tg->camera;
        double v[3][3] = {{c->position.x, c->position.y, c->position.z}, {c->look_at.x, c->look_at.y, c->look_at.z},
                          {c->up.x, c->up.y, c->up.z}};
        memcpy(wd.camera.position, v[0], sizeof v[0]);
        memcpy(wd.camera.look_at, v[1], sizeof v[1]);
        memcpy(wd.camera.up, v[2], sizeof v[2]);
        wd.camera.fov_y_deg = c->fov_y_deg;
        wd.camera.aspect = c->aspect;
        wd.camera.near_m = c->near;
        wd.camera.far_m = c->far;
        wd.slice_depths = g->slice_depths;
    }
    wd.channel_count = pl->channel_count;
    wd.channels = pl->channels;
    wd.compression_level = tg->compression_level;
    wd.metadata = meta;
    wd.metadata_len = meta ? strlen(meta) : 0;

    const size_t brick_floats = (size_t)BRM_BRICK * BRM_BRICK * BRM_BRICK * pl->channel_count;
    const size_t unit_floats = brick_floats * pl->bricks_per_unit;
    const uint32_t batch = batch_units(threads, pl->bricks_per_unit);
    if (!meta) {
        st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", tg->json_path);
        goto done;
    }
    buf = malloc((size_t)batch * unit_floats * sizeof(float));
    if (!buf) {
        st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory for the brick buffers", tg->json_path);
        goto done;
    }
    if ((st = brm_atomic_open(&af, out_path, d)) != BRM_OK) goto done;
    file_open = true;
    char why[256] = "";
    wd.error = why;
    wd.error_size = sizeof why;
    brv_result r = brv_writer_create(af.f, &wd, &w);
    if (r != BRV_OK) {
        st = brm_diag_error(d, BRM_E_IO, "%s: cannot write volume: %s%s%s", out_path, brv_result_text(r), why[0] ? ": " : "", why);
        goto done;
    }
    rc.pl = pl;
    rc.g = g;
    rc.o = o;
    rc.w = w;
    rc.buf = buf;
    rc.unit_floats = unit_floats;
    rc.brick_floats = brick_floats;
    rc.slots = batch;
    rc.failed = BRV_OK;
    rc.ready = calloc(batch, 1);
    rc.total = brm_grid_cells(g);
    if (!rc.ready || pthread_mutex_init(&rc.mu, NULL) != 0) {
        st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory for the brick buffers", tg->json_path);
        goto done;
    }
    if (pthread_cond_init(&rc.cv, NULL) != 0) {
        pthread_mutex_destroy(&rc.mu);
        st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory for the brick buffers", tg->json_path);
        goto done;
    }
    sync_ready = true;
    if (o->cancel && atomic_load(o->cancel)) {
        st = brm_diag_error(d, BRM_E_INTERRUPTED, "%s: interrupted", tg->name);
        goto done;
    }
    if (brm_parallel_for(pl->unit_count, threads, run_unit, &rc, o->cancel) != pl->unit_count) {
        st = brm_diag_error(d, BRM_E_INTERRUPTED, "%s: interrupted", tg->name);
        goto done;
    }
    if (rc.failed != BRV_OK) {
        st = writer_fail(d, out_path, w, rc.failed);
        goto done;
    }
    r = brv_writer_finish(w);
    if (r != BRV_OK) {
        st = writer_fail(d, out_path, w, r);
        goto done;
    }
    long end = ftell(af.f);
    file_open = false;
    if ((st = brm_atomic_commit(&af, d)) != BRM_OK) goto done;
    stats->cells = rc.total;
    stats->bytes = end > 0 ? (uint64_t)end : 0;
done:
    if (sync_ready) {
        pthread_cond_destroy(&rc.cv);
        pthread_mutex_destroy(&rc.mu);
    }
    free(rc.ready);
    if (file_open) brm_atomic_abort(&af);
    brv_writer_free(w);
    free(meta);
    free(buf);
    return st;
}

/* ---- shared per-target state --------------------------------------------------------------- */

typedef struct bake_ctx {
    const brm_scene *scene;
    const brm_target *target;
    const brm_grid *grid;
    const brm_occupancy *occ;
    const brm_bvh *bvh;
    const brm_shadow_set *shadows;
    brm_kernel kernel;
    uint64_t seed;
    int threads;
    uint32_t *light_lists;      /* per worker: light indices after culling */
    uint32_t *sub_lists;        /* per worker: the same, refined for a part of the box */
    uint64_t *light_samples;    /* per worker counters */
    double (*scratch)[3];       /* per worker: BRM_MAX_CELL_SAMPLES points */
    double *column;             /* per worker: frustum column scratch */
    brm_kernel_view_sample *batch;  /* per worker: FRUSTUM_BATCH samples for the frustum tiles */
    brm_media_point *batch_mp;      /* per worker: their media points */
    double *batch_w;                /* per worker: their volume weights */
    brm_kernel_iso_sample *iso;     /* per worker: WORLD_BATCH samples for the world cells */
    brm_media_point *iso_mp;        /* per worker: their media points */
} bake_ctx;

/* Lights that can reach box b, into this worker's list: culled by range and cone, and by the
 * shadow maps where they say the whole box is in shadow; lights the maps say light the whole
 * box are marked so the kernel skips their lookups (the results do not change). */
static uint32_t cull_lights(const bake_ctx *c, brm_aabb b, int worker, uint32_t **out)
{
    uint32_t *lights = c->light_lists + (size_t)worker * (c->scene->light_count + 1);
    uint32_t nl = 0;
    for (uint32_t l = 0; l < c->scene->light_count; l++) {
        if (!brm_light_reaches(&c->scene->lights[l], b)) continue;
        int cls = brm_shadow_classify(c->shadows, l, b);
        if (cls == 0) continue;
        lights[nl++] = cls == 1 ? (l | BRM_KERNEL_LIT) : l;
    }
    *out = lights;
    return nl;
}

/* The list of lights for box b inside the box the list was culled for: lights whose range or
 * cone misses b are dropped, and the lights the maps called mixed there are classified again
 * on b (smaller boxes are more often wholly lit or wholly dark). Exact like cull_lights: a
 * dropped light gives 0 at every point of b, a light marked lit has visibility exactly 1. */
static uint32_t refine_lights(const bake_ctx *c, brm_aabb b, const uint32_t *in, uint32_t n, int worker, uint32_t **out)
{
    uint32_t *lights = c->sub_lists + (size_t)worker * (c->scene->light_count + 1);
    uint32_t m = 0;
    for (uint32_t i = 0; i < n; i++) {
        const uint32_t l = in[i] & ~BRM_KERNEL_LIT;
        if (!brm_light_reaches(&c->scene->lights[l], b)) continue;
        if (in[i] & BRM_KERNEL_LIT) {
            lights[m++] = in[i];
            continue;
        }
        int cls = brm_shadow_classify(c->shadows, l, b);
        if (cls == 0) continue;
        lights[m++] = cls == 1 ? (l | BRM_KERNEL_LIT) : l;
    }
    *out = lights;
    return m;
}

static bool any_mixed(const uint32_t *lights, uint32_t n)
{
    for (uint32_t i = 0; i < n; i++)
        if (!(lights[i] & BRM_KERNEL_LIT)) return true;
    return false;
}

static uint32_t sample_count(const brm_target *t)
{
    return t->samples <= BRM_MAX_CELL_SAMPLES ? t->samples : BRM_MAX_CELL_SAMPLES;
}

/* ---- world --------------------------------------------------------------------------------- */

enum { W_EXT, W_OCC, W_INS, W_DIR = W_INS + 3, WORLD_CH = W_DIR + 12 };

static void world_plan(brm_plan *pl, const brm_target *tg)
{
    static const char *const dirn[12] = {"dir.r0", "dir.r1", "dir.r2", "dir.r3", "dir.g0", "dir.g1",
                                         "dir.g2", "dir.g3", "dir.b0", "dir.b1", "dir.b2", "dir.b3"};
    brm_plan_channel(pl, "extinction", "1/m", enc_for(tg->encoding, false));
    brm_plan_channel(pl, "occupancy", "1", enc_for(tg->encoding, false));
    brm_plan_channel(pl, "inscatter.r", "cd/m2/m", enc_for(tg->encoding, true));
    brm_plan_channel(pl, "inscatter.g", "cd/m2/m", enc_for(tg->encoding, true));
    brm_plan_channel(pl, "inscatter.b", "cd/m2/m", enc_for(tg->encoding, true));
    for (int i = 0; i < 12; i++) brm_plan_channel(pl, dirn[i], "cd/m2/m", enc_for(tg->encoding, false));
}

/* One cell of a world brick: the averages of its samples over its free part. */
static void world_cell(bake_ctx *j, uint32_t i, uint32_t jj, uint32_t k, const uint32_t lo[3], uint32_t nx, uint32_t ny,
                       size_t nc, const uint32_t *lights, uint32_t nl, int worker, float *out, uint64_t *evals)
{
    const brm_grid *g = j->grid;
    const uint32_t S = sample_count(j->target);
    double (*u)[3] = j->scratch + (size_t)worker * BRM_MAX_CELL_SAMPLES;
    size_t gi = brm_grid_index(g, i, jj, k);
    size_t li = (size_t)(i - lo[0]) + nx * ((size_t)(jj - lo[1]) + ny * (size_t)(k - lo[2]));
    double occ = j->occ->fraction[gi];
    double free_frac = 1.0 - occ;
    double ext = 0.0, ins[3] = {0, 0, 0}, dir[3][4] = {{0}};
    if (free_frac > 0.0) {
        brm_cell_samples(j->seed ^ (uint64_t)gi * 0x9e3779b97f4a7c15ull, S, u);
        for (uint32_t si = 0; si < S; si++) {
            brm_vec3 p = brm_grid_point(g, i + u[si][0], jj + u[si][1], k + u[si][2]);
            brm_kernel_out ko;
            brm_kernel_eval(&j->kernel, p, lights, nl, (uint32_t)(gi * S + si), NULL, &ko);
            *evals += ko.light_evals;
            ext += ko.sigma_t;
            for (int c = 0; c < 3; c++) {
                ins[c] += ko.inscatter[c];
                for (int m = 0; m < 4; m++) dir[c][m] += ko.dir[c][m];
            }
        }
    }
    /* Cell averages over the free part: solid parts carry no fog. */
    double w = free_frac / (double)S;
    out[W_EXT * nc + li] = (float)(ext * w);
    out[W_OCC * nc + li] = (float)occ;
    for (int c = 0; c < 3; c++) {
        out[(W_INS + c) * nc + li] = (float)(ins[c] * w);
        for (int m = 0; m < 4; m++) out[(W_DIR + 4 * c + m) * nc + li] = (float)(dir[c][m] * w);
    }
}

/* The cells of box [a, e) of a world brick, all lit by the same light list: their samples go
 * through the kernel a batch at a time, light by light (brm_kernel_eval_iso_batch), and each
 * cell's averages are summed in world_cell's order, so the same values. */
static void world_cells(bake_ctx *j, const uint32_t a[3], const uint32_t e[3], const uint32_t lo[3], uint32_t nx,
                        uint32_t ny, size_t nc, const uint32_t *lights, uint32_t nl, int worker, float *out,
                        uint64_t *evals)
{
    const brm_grid *g = j->grid;
    const uint32_t S = sample_count(j->target);
    if (S > WORLD_BATCH) {
        for (uint32_t k = a[2]; k < e[2]; k++)
            for (uint32_t jj = a[1]; jj < e[1]; jj++)
                for (uint32_t i = a[0]; i < e[0]; i++) world_cell(j, i, jj, k, lo, nx, ny, nc, lights, nl, worker, out, evals);
        return;
    }
    brm_kernel_iso_sample *bs = j->iso + (size_t)worker * WORLD_BATCH;
    brm_media_point *mp = j->iso_mp + (size_t)worker * WORLD_BATCH;
    double (*u)[3] = j->scratch + (size_t)worker * BRM_MAX_CELL_SAMPLES;
    enum { MAX_CELLS = WORLD_BATCH };
    size_t cell_li[MAX_CELLS];
    double cell_occ[MAX_CELLS];
    uint32_t cell_n[MAX_CELLS]; /* samples the cell put in the batch: S, or 0 when solid */
    uint32_t cells = 0, n = 0;
    const uint32_t total = (e[0] - a[0]) * (e[1] - a[1]) * (e[2] - a[2]);
    uint32_t seen = 0;
    for (uint32_t k = a[2]; k < e[2]; k++)
        for (uint32_t jj = a[1]; jj < e[1]; jj++)
            for (uint32_t i = a[0]; i < e[0]; i++) {
                seen++;
                size_t gi = brm_grid_index(g, i, jj, k);
                double occ = j->occ->fraction[gi];
                cell_li[cells] = (size_t)(i - lo[0]) + nx * ((size_t)(jj - lo[1]) + ny * (size_t)(k - lo[2]));
                cell_occ[cells] = occ;
                cell_n[cells] = 0;
                if (1.0 - occ > 0.0) {
                    brm_cell_samples(j->seed ^ (uint64_t)gi * 0x9e3779b97f4a7c15ull, S, u);
                    for (uint32_t si = 0; si < S; si++) {
                        bs[n].p = brm_grid_point(g, i + u[si][0], jj + u[si][1], k + u[si][2]);
                        bs[n].sample_index = (uint32_t)(gi * S + si);
                        n++;
                    }
                    cell_n[cells] = S;
                }
                cells++;
                if (cells < MAX_CELLS && n + S <= WORLD_BATCH && seen < total) continue;
                brm_kernel_eval_iso_batch(&j->kernel, bs, n, lights, nl, mp);
                const brm_kernel_iso_sample *q = bs;
                for (uint32_t c = 0; c < cells; c++) {
                    double ext = 0.0, ins[3] = {0, 0, 0}, dir[3][4] = {{0}};
                    for (uint32_t si = 0; si < cell_n[c]; si++, q++) {
                        *evals += q->light_evals;
                        ext += q->sigma_t;
                        for (int ch = 0; ch < 3; ch++) {
                            ins[ch] += q->inscatter[ch];
                            for (int m = 0; m < 4; m++) dir[ch][m] += q->dir[ch][m];
                        }
                    }
                    /* As world_cell: averages over the free part (solid parts carry no fog). */
                    const size_t li = cell_li[c];
                    double w = (1.0 - cell_occ[c]) / (double)S;
                    out[W_EXT * nc + li] = (float)(ext * w);
                    out[W_OCC * nc + li] = (float)cell_occ[c];
                    for (int ch = 0; ch < 3; ch++) {
                        out[(W_INS + ch) * nc + li] = (float)(ins[ch] * w);
                        for (int m = 0; m < 4; m++) out[(W_DIR + 4 * ch + m) * nc + li] = (float)(dir[ch][m] * w);
                    }
                }
                cells = n = 0;
            }
}

static void world_unit(void *ctx, uint32_t b, int worker, float *out)
{
    bake_ctx *j = ctx;
    const brm_grid *g = j->grid;
    uint32_t lo[3], hi[3];
    brm_grid_brick_range(g, b, lo, hi);
    uint32_t nx = hi[0] - lo[0], ny = hi[1] - lo[1], nz = hi[2] - lo[2];
    size_t nc = (size_t)nx * ny * nz;
    brm_aabb bb = {brm_grid_point(g, lo[0], lo[1], lo[2]), brm_grid_point(g, hi[0], hi[1], hi[2])};
    uint32_t *lights;
    uint32_t nl = cull_lights(j, bb, worker, &lights);
    uint64_t evals = 0;
    /* Where the maps left a light mixed over the brick, each octant of it is culled again. */
    const bool split = any_mixed(lights, nl);
    const uint32_t parts = split ? 2 : 1;
    for (uint32_t oz = 0; oz < parts; oz++)
        for (uint32_t oy = 0; oy < parts; oy++)
            for (uint32_t ox = 0; ox < parts; ox++) {
                const uint32_t o[3] = {ox, oy, oz};
                uint32_t a[3], e[3];
                for (int ax = 0; ax < 3; ax++) {
                    uint32_t mid = lo[ax] + (hi[ax] - lo[ax] + 1) / 2;
                    a[ax] = !split ? lo[ax] : o[ax] ? mid : lo[ax];
                    e[ax] = !split ? hi[ax] : o[ax] ? hi[ax] : mid;
                }
                if (a[0] >= e[0] || a[1] >= e[1] || a[2] >= e[2]) continue;
                const uint32_t *ls = lights;
                uint32_t n = nl;
                if (split) {
                    brm_aabb ob = {brm_grid_point(g, a[0], a[1], a[2]), brm_grid_point(g, e[0], e[1], e[2])};
                    uint32_t *sub;
                    n = refine_lights(j, ob, lights, nl, worker, &sub);
                    ls = sub;
                }
                world_cells(j, a, e, lo, nx, ny, nc, ls, n, worker, out, &evals);
            }
    j->light_samples[worker] += evals;
}

/* ---- frustum ------------------------------------------------------------------------------- */

enum { F_EXT, F_OCC, F_SCAT, F_TRANS = F_SCAT + 3, F_INS, FRUSTUM_CH_MAX = F_INS + 3 };
enum { COL_EXT, COL_OCC, COL_S, COL_FIELDS = COL_S + 3 };
/* The frustum unit's tiles of froxels (x and y, depth). */
enum { FRUSTUM_TILE_XY = 4, FRUSTUM_TILE_Z = 4 };
_Static_assert(COL_FIELDS == 5, "frustum_column_bytes counts COL_FIELDS doubles a froxel");

static void frustum_plan(brm_plan *pl, const brm_target *tg)
{
    brm_plan_channel(pl, "extinction", "1/m", enc_for(tg->encoding, false));
    brm_plan_channel(pl, "occupancy", "1", enc_for(tg->encoding, false));
    brm_plan_channel(pl, "scatter.r", "cd/m2", enc_for(tg->encoding, true));
    brm_plan_channel(pl, "scatter.g", "cd/m2", enc_for(tg->encoding, true));
    brm_plan_channel(pl, "scatter.b", "cd/m2", enc_for(tg->encoding, true));
    brm_plan_channel(pl, "transmittance", "1", enc_for(tg->encoding, false));
    if (tg->keep_froxel_terms) {
        brm_plan_channel(pl, "inscatter.r", "cd/m2/m", enc_for(tg->encoding, true));
        brm_plan_channel(pl, "inscatter.g", "cd/m2/m", enc_for(tg->encoding, true));
        brm_plan_channel(pl, "inscatter.b", "cd/m2/m", enc_for(tg->encoding, true));
    }
}

/* The view-dependent in-scatter S (toward the camera, cd/m² per m) and extinction averaged over
 * a froxel by jittered samples weighted by their volume element (∝ depth² in a pyramid). */
static void froxel_average(bake_ctx *j, uint32_t i, uint32_t jj, uint32_t k, const uint32_t *lights, uint32_t nl,
                           int worker, double out[COL_FIELDS], uint64_t *evals)
{
    const brm_grid *g = j->grid;
    size_t gi = brm_grid_index(g, i, jj, k);
    double occ = j->occ->fraction[gi];
    out[COL_OCC] = occ;
    out[COL_EXT] = out[COL_S] = out[COL_S + 1] = out[COL_S + 2] = 0.0;
    if (occ >= 1.0) return;
    const uint32_t S = sample_count(j->target);
    double (*u)[3] = j->scratch + (size_t)worker * BRM_MAX_CELL_SAMPLES;
    brm_cell_samples(j->seed ^ (uint64_t)gi * 0x9e3779b97f4a7c15ull, S, u);
    double wsum = 0.0, ext = 0.0, sc[3] = {0, 0, 0};
    for (uint32_t si = 0; si < S; si++) {
        brm_vec3 p = brm_grid_point(g, i + u[si][0], jj + u[si][1], k + u[si][2]);
        brm_vec3 v = brm_sub(p, g->cam.position);
        double depth = brm_dot(v, g->fwd);
        brm_vec3 view = brm_norm(v);
        brm_kernel_out ko;
        brm_kernel_eval_view(&j->kernel, p, lights, nl, (uint32_t)(gi * S + si), view, &ko);
        *evals += ko.light_evals;
        double w = depth * depth;
        wsum += w;
        ext += w * ko.sigma_t;
        for (int c = 0; c < 3; c++) sc[c] += w * ko.toward_view[c];
    }
    double f = (1.0 - occ) / wsum;
    out[COL_EXT] = ext * f;
    for (int c = 0; c < 3; c++) out[COL_S + c] = sc[c] * f;
}

/* The froxels of one tile [i0, i1) × [j0, j1) × [k0, k1), all lit by the same light list: their
 * samples go through the kernel a batch at a time, light by light. The same values as
 * froxel_average, summed in the same order. cols: the unit's columns from (lo0, lo1). */
static void frustum_tile(bake_ctx *j, const uint32_t t0[3], const uint32_t t1[3], uint32_t lo0, uint32_t lo1, uint32_t nx,
                         size_t col_stride, double *cols, const uint32_t *lights, uint32_t nl, int worker, uint64_t *evals)
{
    const brm_grid *g = j->grid;
    const uint32_t S = sample_count(j->target);
    if (S > FRUSTUM_BATCH) {
        for (uint32_t k = t0[2]; k < t1[2]; k++)
            for (uint32_t jj = t0[1]; jj < t1[1]; jj++)
                for (uint32_t i = t0[0]; i < t1[0]; i++) {
                    double *col = cols + ((size_t)(jj - lo1) * nx + (i - lo0)) * col_stride;
                    froxel_average(j, i, jj, k, lights, nl, worker, col + (size_t)(k + 1) * COL_FIELDS, evals);
                }
        return;
    }
    brm_kernel_view_sample *vs = j->batch + (size_t)worker * FRUSTUM_BATCH;
    brm_media_point *mp = j->batch_mp + (size_t)worker * FRUSTUM_BATCH;
    double *wt = j->batch_w + (size_t)worker * FRUSTUM_BATCH;
    double (*u)[3] = j->scratch + (size_t)worker * BRM_MAX_CELL_SAMPLES;
    enum { TILE_FROXELS = FRUSTUM_TILE_XY * FRUSTUM_TILE_XY * FRUSTUM_TILE_Z };
    double *dst[TILE_FROXELS];
    uint32_t pending = 0, n = 0;
    const uint32_t tile_froxels = (t1[0] - t0[0]) * (t1[1] - t0[1]) * (t1[2] - t0[2]);
    uint32_t seen = 0;
    for (uint32_t k = t0[2]; k < t1[2]; k++)
        for (uint32_t jj = t0[1]; jj < t1[1]; jj++)
            for (uint32_t i = t0[0]; i < t1[0]; i++) {
                seen++;
                double *out = cols + ((size_t)(jj - lo1) * nx + (i - lo0)) * col_stride + (size_t)(k + 1) * COL_FIELDS;
                size_t gi = brm_grid_index(g, i, jj, k);
                double occ = j->occ->fraction[gi];
                out[COL_OCC] = occ;
                out[COL_EXT] = out[COL_S] = out[COL_S + 1] = out[COL_S + 2] = 0.0;
                if (occ < 1.0) {
                    brm_cell_samples(j->seed ^ (uint64_t)gi * 0x9e3779b97f4a7c15ull, S, u);
                    for (uint32_t si = 0; si < S; si++) {
                        brm_vec3 p = brm_grid_point(g, i + u[si][0], jj + u[si][1], k + u[si][2]);
                        brm_vec3 v = brm_sub(p, g->cam.position);
                        double depth = brm_dot(v, g->fwd);
                        vs[n].p = p;
                        vs[n].view = brm_norm(v);
                        vs[n].sample_index = (uint32_t)(gi * S + si);
                        wt[n] = depth * depth;
                        n++;
                    }
                    dst[pending++] = out;
                }
                /* Flush when the next froxel's samples would not fit, or at the tile's end. */
                if (pending > 0 && (n + S > FRUSTUM_BATCH || seen == tile_froxels)) {
                    brm_kernel_eval_view_batch(&j->kernel, vs, n, lights, nl, mp);
                    for (uint32_t f = 0; f < pending; f++) {
                        const brm_kernel_view_sample *q = vs + (size_t)f * S;
                        const double *w = wt + (size_t)f * S;
                        double wsum = 0.0, ext = 0.0, sc[3] = {0, 0, 0};
                        for (uint32_t si = 0; si < S; si++) {
                            *evals += q[si].light_evals;
                            wsum += w[si];
                            ext += w[si] * q[si].sigma_t;
                            for (int c = 0; c < 3; c++) sc[c] += w[si] * q[si].toward_view[c];
                        }
                        double *o = dst[f];
                        double fr = (1.0 - o[COL_OCC]) / wsum;
                        o[COL_EXT] = ext * fr;
                        for (int c = 0; c < 3; c++) o[COL_S + c] = sc[c] * fr;
                    }
                    pending = n = 0;
                }
            }
}

/* Energy-conserving integral of a slab with constant extinction and source (REFERENCES.md §6c):
 * ∫_0^len S·e^(−sigma·t) dt = S·(1 − e^(−sigma·len))/sigma, with the limit S·len as sigma → 0. */
static double slab_integral(double S, double sigma, double len, double *trans)
{
    double tau = sigma * len;
    double T = exp(-tau);
    *trans = T;
    if (tau < 1e-7) return S * len * (1.0 - 0.5 * tau);
    return S * (1.0 - T) / sigma;
}

static void frustum_unit(void *ctx, uint32_t unit, int worker, float *out)
{
    bake_ctx *j = ctx;
    const brm_grid *g = j->grid;
    const uint32_t nz = g->n[2], nbz = g->bricks[2];
    const uint32_t chn = j->target->keep_froxel_terms ? FRUSTUM_CH_MAX : F_INS;
    const size_t brick_floats = (size_t)BRM_BRICK * BRM_BRICK * BRM_BRICK * chn;
    uint32_t lo[3], hi[3];
    brm_grid_brick_range(g, unit, lo, hi); /* unit = brick (bx, by, 0): its x, y range */
    uint32_t nx = hi[0] - lo[0], ny = hi[1] - lo[1];
    /* The unit's froxel averages, column by column (slot 0 of a column: the near stretch). */
    const size_t col_stride = ((size_t)nz + 1) * COL_FIELDS;
    double *cols = j->column + (size_t)worker * BRM_BRICK * BRM_BRICK * col_stride;
    uint64_t evals = 0;
    /* Froxels in small 3-D tiles, each with the lights that reach it: neighbouring lookups
     * in the maps and grids then fall on the same cache lines. The averages do not depend
     * on the order or on the culling box (culling is exact), so neither do the bytes. */
    for (uint32_t k0 = 0; k0 < nz; k0 += FRUSTUM_TILE_Z)
        for (uint32_t j0 = lo[1]; j0 < hi[1]; j0 += FRUSTUM_TILE_XY)
            for (uint32_t i0 = lo[0]; i0 < hi[0]; i0 += FRUSTUM_TILE_XY) {
                const uint32_t i1 = i0 + FRUSTUM_TILE_XY < hi[0] ? i0 + FRUSTUM_TILE_XY : hi[0];
                const uint32_t j1 = j0 + FRUSTUM_TILE_XY < hi[1] ? j0 + FRUSTUM_TILE_XY : hi[1];
                const uint32_t k1 = k0 + FRUSTUM_TILE_Z < nz ? k0 + FRUSTUM_TILE_Z : nz;
                brm_aabb fb = brm_aabb_empty();
                for (int c = 0; c < 8; c++)
                    brm_aabb_grow(&fb, brm_grid_point(g, (c & 1) ? i1 : i0, (c & 2) ? j1 : j0, (c & 4) ? k1 : k0));
                uint32_t *lights;
                uint32_t nl = cull_lights(j, fb, worker, &lights);
                const uint32_t t0[3] = {i0, j0, k0}, t1[3] = {i1, j1, k1};
                frustum_tile(j, t0, t1, lo[0], lo[1], nx, col_stride, cols, lights, nl, worker, &evals);
            }
    for (uint32_t jj = lo[1]; jj < hi[1]; jj++)
        for (uint32_t i = lo[0]; i < hi[0]; i++) {
            double *col = cols + ((size_t)(jj - lo[1]) * nx + (i - lo[0])) * col_stride;
            uint32_t *lights;
            uint32_t nl;
            /* The stretch from the camera to the near plane, by samples along the centre ray. */
            brm_aabb nb = brm_aabb_empty();
            brm_aabb_grow(&nb, g->cam.position);
            for (int c = 0; c < 4; c++) brm_aabb_grow(&nb, brm_grid_point(g, i + (c & 1), jj + (c >> 1), 0));
            nl = cull_lights(j, nb, worker, &lights);
            double x = 2.0 * (i + 0.5) / g->n[0] - 1.0, y = 2.0 * (jj + 0.5) / g->n[1] - 1.0;
            brm_vec3 ray = brm_add(g->fwd, brm_add(brm_scale(g->right, x * g->tan_half_x), brm_scale(g->up, y * g->tan_half_y)));
            double ray_len = brm_len(ray);
            brm_vec3 view = brm_scale(ray, 1.0 / ray_len);
            {
                const uint32_t S = sample_count(j->target);
                double (*u)[3] = j->scratch + (size_t)worker * BRM_MAX_CELL_SAMPLES;
                uint64_t key = j->seed ^ ((uint64_t)(i + 1) * 0x632be59bd9b4e019ull + (uint64_t)(jj + 1) * 0x8cb92ba72f3d8dd7ull);
                brm_cell_samples(key, S, u);
                double ext = 0, sc[3] = {0, 0, 0};
                for (uint32_t si = 0; si < S; si++) {
                    brm_vec3 p = brm_madd(g->cam.position, ray, g->cam.near * u[si][2]);
                    brm_kernel_out ko;
                    brm_kernel_eval_view(&j->kernel, p, lights, nl, si, view, &ko);
                    evals += ko.light_evals;
                    ext += ko.sigma_t;
                    for (int c = 0; c < 3; c++) sc[c] += ko.toward_view[c];
                }
                col[COL_EXT] = ext / S;
                for (int c = 0; c < 3; c++) col[COL_S + c] = sc[c] / S;
            }
            /* Front-to-back: L += T·∫S e^(−σt) over each slab, T *= e^(−σ·len). */
            double L[3] = {0, 0, 0}, T = 1.0;
            for (uint32_t k = 0; k <= nz; k++) {
                const double *f = col + (size_t)k * COL_FIELDS;
                double d0 = k == 0 ? 0.0 : g->slice_depths[k - 1], d1 = k == 0 ? g->cam.near : g->slice_depths[k];
                double len = (d1 - d0) * ray_len, Ts = 1.0;
                for (int c = 0; c < 3; c++) L[c] += T * slab_integral(f[COL_S + c], f[COL_EXT], len, &Ts);
                T *= Ts;
                if (k == 0) continue;
                uint32_t kk = k - 1, bz = kk / BRM_BRICK, lz = kk % BRM_BRICK;
                uint32_t bnz = (bz + 1) * BRM_BRICK <= nz ? BRM_BRICK : nz - bz * BRM_BRICK;
                size_t nc = (size_t)nx * ny * bnz;
                float *bo = out + (size_t)bz * brick_floats;
                size_t li = (size_t)(i - lo[0]) + nx * ((size_t)(jj - lo[1]) + ny * lz);
                bo[F_EXT * nc + li] = (float)f[COL_EXT];
                bo[F_OCC * nc + li] = (float)f[COL_OCC];
                for (int c = 0; c < 3; c++) bo[(F_SCAT + c) * nc + li] = (float)L[c];
                bo[F_TRANS * nc + li] = (float)T;
                if (chn == FRUSTUM_CH_MAX)
                    for (int c = 0; c < 3; c++) bo[(F_INS + c) * nc + li] = (float)f[COL_S + c];
            }
        }
    (void)nbz;
    j->light_samples[worker] += evals;
}

/* ---- one target ---------------------------------------------------------------------------- */

/* The voxelizer on a thread of its own, beside the shadow build: much of voxelizing is serial
 * (the solid index, the flood fill of empty components), and the maps' parallel phases keep the
 * other cores busy meanwhile. Neither reads what the other writes; each result is keyed by cell
 * or item, never by thread, so the bytes stay those of the serial order. */
typedef struct voxel_job {
    const brm_scene *s;
    const brm_grid *g;
    int threads;
    brm_occupancy *occ;
    brm_diag d;
    brm_status st;
} voxel_job;

static void *voxel_main(void *arg)
{
    voxel_job *v = arg;
    v->st = brm_voxelize(v->s, v->g, v->threads, v->occ, &v->d);
    return NULL;
}

/* Voxelizes (world and frustum grids), builds the ray caster and the shadow set, the voxelizer
 * overlapping the rest when there is more than one thread. Errors are reported in that order:
 * the voxelizer's, the ray caster's, the shadow set's. */
static brm_status prepare(const brm_scene *s, const brm_target *tg, const brm_grid *g, int threads, const brm_bake_opts *o,
                          brm_occupancy *occ, brm_bvh **bvh, brm_shadow_set **ss, brm_bake_stats *stats, brm_diag *d)
{
    const bool voxelize = tg->grid != BRM_GRID_PROBES;
    voxel_job *vj = NULL;
    brm_diag *sd = NULL;
    bool started = false;
    brm_status st;
    if (voxelize && threads > 1) {
        vj = malloc(sizeof *vj);
        sd = malloc(sizeof *sd);
        if (vj && sd) {
            *vj = (voxel_job){.s = s, .g = g, .threads = threads / 2, .occ = occ, .st = BRM_OK};
            brm_diag_init(&vj->d);
            brm_diag_init(sd);
            pthread_t tid;
            started = pthread_create(&tid, NULL, voxel_main, vj) == 0;
            if (started) {
                /* The ray caster and the shadow set, into their own diag until the voxelizer's
                 * result is known (its error comes first). */
                st = BRM_OK;
                if (s->tri_count > 0 || s->object_count > 0) st = brm_bvh_build(s, bvh, sd);
                if (st == BRM_OK) {
                    double t_shadow = brm_now();
                    brm_shadow_opts so = {lit_bounds(s, g), min_cell_edge(g), threads, o->reference, *bvh, false, 1.0};
                    st = brm_shadows_build(s, &so, ss, sd);
                    stats->shadow_seconds = brm_now() - t_shadow;
                }
                pthread_join(tid, NULL);
                brm_diag_merge_warnings(d, &vj->d);
                if (vj->st != BRM_OK) {
                    st = brm_diag_error(d, vj->st, "%s", vj->d.message);
                } else {
                    brm_diag_merge_warnings(d, sd);
                    if (st != BRM_OK) brm_diag_error(d, st, "%s", sd->message);
                }
                free(vj);
                free(sd);
                return st;
            }
        }
        free(vj);
        free(sd);
    }
    /* One thread (or no second thread to be had): one step after the other. */
    if (voxelize && (st = brm_voxelize(s, g, threads, occ, d)) != BRM_OK) return st;
    if (s->tri_count > 0 || s->object_count > 0) {
        if ((st = brm_bvh_build(s, bvh, d)) != BRM_OK) return st;
    }
    double t_shadow = brm_now();
    brm_shadow_opts so = {lit_bounds(s, g), min_cell_edge(g), threads, o->reference, *bvh, false, 1.0};
    if ((st = brm_shadows_build(s, &so, ss, d)) != BRM_OK) return st;
    stats->shadow_seconds = brm_now() - t_shadow;
    return BRM_OK;
}

static brm_status bake_grid(const brm_scene *s, uint32_t t, const brm_bake_opts *o, const char *out_path,
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
    bake_ctx c;
    memset(&c, 0, sizeof c);

    if ((st = prepare(s, tg, &g, threads, o, &occ, &bvh, &ss, stats, d)) != BRM_OK) goto done;

    if (tg->grid == BRM_GRID_PROBES) {
        st = brm_bake_probes(s, t, o, &g, bvh, ss, out_path, stats, d);
        goto done;
    }

    c.scene = s;
    c.target = tg;
    c.grid = &g;
    c.occ = &occ;
    c.bvh = bvh;
    c.shadows = ss;
    c.kernel.scene = s;
    c.kernel.shadows = ss;
    c.threads = threads;
    {
        /* Samples are keyed by the target's name: a target always gets the same samples. */
        uint8_t dg[32];
        brm_sha256_buf(tg->name, strlen(tg->name), dg);
        memcpy(&c.seed, dg, sizeof c.seed);
    }
    c.light_lists = calloc((size_t)threads * (s->light_count + 1), sizeof *c.light_lists);
    c.sub_lists = calloc((size_t)threads * (s->light_count + 1), sizeof *c.sub_lists);
    c.light_samples = calloc((size_t)threads, sizeof *c.light_samples);
    c.scratch = malloc((size_t)threads * BRM_MAX_CELL_SAMPLES * sizeof *c.scratch);
    if (tg->grid == BRM_GRID_FRUSTUM) {
        c.column = malloc(frustum_column_bytes(&g) * (size_t)threads);
        c.batch = malloc((size_t)threads * FRUSTUM_BATCH * sizeof *c.batch);
        c.batch_mp = malloc((size_t)threads * FRUSTUM_BATCH * sizeof *c.batch_mp);
        c.batch_w = malloc((size_t)threads * FRUSTUM_BATCH * sizeof *c.batch_w);
    }
    if (tg->grid == BRM_GRID_WORLD) {
        c.iso = malloc((size_t)threads * WORLD_BATCH * sizeof *c.iso);
        c.iso_mp = malloc((size_t)threads * WORLD_BATCH * sizeof *c.iso_mp);
    }
    if (!c.light_lists || !c.sub_lists || !c.light_samples || !c.scratch ||
        (tg->grid == BRM_GRID_FRUSTUM && (!c.column || !c.batch || !c.batch_mp || !c.batch_w)) ||
        (tg->grid == BRM_GRID_WORLD && (!c.iso || !c.iso_mp))) {
        st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", tg->json_path);
        goto done;
    }
    brm_plan pl;
    memset(&pl, 0, sizeof pl);
    pl.ctx = &c;
    if (tg->grid == BRM_GRID_WORLD) {
        world_plan(&pl, tg);
        pl.unit_count = brm_grid_brick_count(&g);
        pl.bricks_per_unit = 1;
        pl.compute = world_unit;
        pl.brick_of = brm_plan_brick_is_unit;
    } else {
        frustum_plan(&pl, tg);
        pl.unit_count = g.bricks[0] * g.bricks[1];
        pl.bricks_per_unit = g.bricks[2];
        pl.compute = frustum_unit;
        pl.brick_of = brick_of_column;
    }
    st = brm_run_plan(s, t, o, &g, &pl, out_path, stats, d);
    for (int i = 0; i < threads; i++) stats->light_samples += c.light_samples[i];

done:
    free(c.light_lists);
    free(c.sub_lists);
    free(c.light_samples);
    free(c.scratch);
    free(c.column);
    free(c.batch);
    free(c.batch_mp);
    free(c.batch_w);
    free(c.iso);
    free(c.iso_mp);
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
    st = bake_grid(s, t, o, out_path, stats, d);
    stats->seconds = brm_now() - t0;
    return st;
}
