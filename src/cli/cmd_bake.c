/* brume bake SCENE.json|FOLDER... — bake every target (or the named ones) into .brv volumes.
 *
 * The run, in order: expand the arguments into scene files; load every scene (a broken scene
 * fails alone); pick the targets; decide which are up to date (their output's metadata holds
 * the input hash the bake would write); compute warnings; then bake the rest, several at once
 * when they are small, each with its share of the -j threads, within the memory budget; and
 * finally write the report and the summary. Only the main thread prints: workers store their
 * progress in atomics and the main thread draws it on a terminal, a few times a second.
 *
 * Interruption: the first SIGINT or SIGTERM sets brm_interrupted, which every bake polls
 * between bricks; running bakes stop and remove their temporaries (previous outputs stay),
 * the report is written with those targets `interrupted`, and the exit status is 3. A second
 * signal removes the temporaries still open and exits 3 at once. */
#define _DEFAULT_SOURCE /* TIOCGWINSZ */
#include <cJSON.h>
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <pthread.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/ioctl.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "bake/bake.h"
#include "bake/warnings.h"
#include "base/atomic_file.h"
#include "base/threads.h"
#include "brume/brv.h"
#include "cli/cli.h"
#include "cli/scenes.h"
#include "scene/scene.h"

static const char *help =
    "usage: brume bake SCENE.json|FOLDER... [options]\n"
    "\n"
    "Bakes every target of each scene. A folder stands for every scene below it: each *.json\n"
    "file with a top-level \"brume\" key, in subfolders too, in sorted order. With one scene the\n"
    "volumes go to DIR/<target>.brv, DIR defaulting to out/<scene name>/; with several, to\n"
    "DIR/<scene name>/<target>.brv, DIR defaulting to out/.\n"
    "\n"
    "A target whose inputs are unchanged since its last bake is up to date and not baked again:\n"
    "its part of the scene (the lights that can reach it, not the others), the content of every\n"
    "file the scene references, the settings and the tool version, as recorded in the metadata\n"
    "of its existing output. Timestamps play no part.\n"
    "\n"
    "Small targets bake several at once, one thread each; big ones get more of the -j threads;\n"
    "targets running together stay within the memory budget. Results do not depend on -j.\n"
    "\n"
    "  -o DIR              output folder\n"
    "  --target NAME       bake only targets of this name (repeatable)\n"
    "  -j N                worker threads in all (default: all cores)\n"
    "  --force             bake even targets that are up to date\n"
    "  --report FILE.json  write a report of every target, also when some fail or on interrupt:\n"
    "                      {\"targets\": [{\"scene\", \"name\", \"status\", \"seconds\", \"cells\",\n"
    "                      \"output\", \"bytes\", \"warnings\", \"error\"}]}, status one of baked,\n"
    "                      up-to-date, failed, interrupted\n"
    "  --quiet             no progress and no per-target lines, only warnings, errors and the\n"
    "                      final summary\n"
    "  --reference         slow exact mode (ray-traced visibility, marched transmittance)\n"
    "  --max-memory SIZE   memory budget, bytes with optional K, M, G (default: half the RAM);\n"
    "                      a target estimated over it fails with the cell count that would fit\n"
    "  --fail-fast         start no further target once one has failed\n"
    "\n"
    "On a terminal, each target in progress has a line with a bar, cells per second and the time\n"
    "left (no colour when NO_COLOR is set). Elsewhere, or with --quiet, stderr gets only warnings,\n"
    "errors and the summary. SIGINT or SIGTERM stops the bake within about a second, keeps every\n"
    "previous output and writes the report; a second signal exits at once.\n"
    "\n"
    "Exit status: 0 all targets baked or up to date, 1 invalid input, 2 usage error, 3 I/O,\n"
    "over the memory budget or interrupted. With several failures, the status of the first.\n";

/* ---- jobs ------------------------------------------------------------------------------- */

enum job_state { JOB_PENDING, JOB_RUNNING, JOB_DONE, JOB_SHOWN };

typedef struct str_list {
    char **items;
    uint32_t count, cap;
} str_list;

typedef struct job {
    /* what */
    const brm_scene *scene;         /* NULL: the scene failed to load (an error-only entry) */
    uint32_t target;
    size_t seq;                     /* position in input order */
    char scene_name[BRM_PATH_MAX];  /* the scene's name, or its path when it did not load */
    char name[BRM_NAME_MAX];
    char output[BRM_PATH_MAX];
    char hash[65];
    /* plan */
    uint64_t est_memory;
    uint64_t work;
    int width;                      /* threads it gets */
    /* result */
    const char *status;             /* "baked", "up-to-date", "failed", "interrupted" */
    bool not_started;               /* stopped before its turn (interrupt or --fail-fast) */
    brm_status st;
    double seconds;
    uint64_t cells, bytes;
    char *error;                    /* malloc'd, NULL when none */
    str_list warnings;
    /* running */
    int state;                      /* enum job_state, under the run lock */
    pthread_t tid;
    double t_start;
    double t_first;                 /* main thread: when bricks were first seen done */
    uint64_t done_first;
    atomic_uint_least64_t done, total;
    struct run *run;
} job;

typedef struct run {
    /* options */
    const char *out_dir;
    const char **targets;
    int target_count;
    bool force, quiet, fail_fast;
    const char *report_path;
    brm_bake_opts opts;
    int threads;
    uint64_t budget;
    /* terminal */
    bool progress;                  /* draw progress on stderr */
    bool color_err, color_out;
    int drawn;                      /* progress lines currently on screen */
    /* jobs */
    job **jobs;
    size_t job_count, job_cap;
    /* the scheduler */
    pthread_mutex_t lock;
    pthread_cond_t cond;
    int threads_used;
    uint64_t memory_used;
    size_t running;
} run;

static int str_push(str_list *l, const char *s)
{
    if (l->count == l->cap) {
        uint32_t nc = l->cap ? l->cap * 2 : 4;
        char **ni = realloc(l->items, nc * sizeof *ni);
        if (!ni) return -1;
        l->items = ni;
        l->cap = nc;
    }
    size_t n = strlen(s) + 1;
    if (!(l->items[l->count] = malloc(n))) return -1;
    memcpy(l->items[l->count++], s, n);
    return 0;
}

static void str_free(str_list *l)
{
    for (uint32_t i = 0; i < l->count; i++) free(l->items[i]);
    free(l->items);
    memset(l, 0, sizeof *l);
}

static char *dup_str(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d) memcpy(d, s, n);
    return d;
}

static job *add_job(run *r)
{
    if (r->job_count == r->job_cap) {
        size_t nc = r->job_cap ? r->job_cap * 2 : 16;
        job **nj = realloc(r->jobs, nc * sizeof *nj);
        if (!nj) return NULL;
        r->jobs = nj;
        r->job_cap = nc;
    }
    job *j = calloc(1, sizeof *j);
    if (!j) return NULL;
    atomic_init(&j->done, 0);
    atomic_init(&j->total, 0);
    j->run = r;
    j->st = BRM_OK;
    j->seq = r->job_count;
    r->jobs[r->job_count++] = j;
    return j;
}

static void job_fail(job *j, brm_status st, const char *msg)
{
    j->st = st;
    j->status = st == BRM_E_INTERRUPTED ? "interrupted" : "failed";
    free(j->error);
    j->error = dup_str(msg);
}

/* ---- signals ---------------------------------------------------------------------------- */

static void on_signal(int sig)
{
    (void)sig;
    /* The second signal: give up waiting for the workers. Only async-signal-safe calls. */
    if (atomic_exchange(&brm_interrupted, 1)) {
        brm_atomic_cleanup_all();
        _exit(BRM_EXIT_IO);
    }
}

static void install_signals(void)
{
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);
}

static bool interrupted(void) { return atomic_load(&brm_interrupted) != 0; }

/* ---- terminal output -------------------------------------------------------------------- */

/* NO_COLOR (no-color.org): present and not empty turns colour off; so does TERM=dumb. */
static bool want_color(int fd)
{
    const char *nc = getenv("NO_COLOR"), *term = getenv("TERM");
    if (nc && nc[0]) return false;
    if (term && strcmp(term, "dumb") == 0) return false;
    return isatty(fd) != 0;
}

static int term_width(void)
{
    struct winsize ws;
    if (ioctl(STDERR_FILENO, TIOCGWINSZ, &ws) == 0 && ws.ws_col >= 20) return ws.ws_col;
    return 80;
}

#define C_RESET "\033[0m"
#define C_GREEN "\033[32m"
#define C_RED "\033[31m"
#define C_YELLOW "\033[33m"
#define C_CYAN "\033[36m"
#define C_DIM "\033[2m"

static const char *status_color(const char *st)
{
    if (strcmp(st, "baked") == 0) return C_GREEN;
    if (strcmp(st, "up-to-date") == 0) return C_CYAN;
    if (strcmp(st, "interrupted") == 0) return C_YELLOW;
    return C_RED;
}

/* 1234567 → "1.23M". */
static void fmt_rate(char *buf, size_t n, double v)
{
    static const char *unit[] = {"", "k", "M", "G", "T"};
    int u = 0;
    while (v >= 999.5 && u < 4) {
        v /= 1000.0;
        u++;
    }
    snprintf(buf, n, v < 9.995 ? "%.2f%s" : v < 99.95 ? "%.1f%s" : "%.0f%s", v, unit[u]);
}

static void fmt_time(char *buf, size_t n, double s)
{
    if (!(s >= 0.0) || s > 359999.0) snprintf(buf, n, "--");
    else if (s < 60.0) snprintf(buf, n, "%.0f s", s);
    else if (s < 3600.0) snprintf(buf, n, "%dm%02ds", (int)(s / 60.0), (int)s % 60);
    else snprintf(buf, n, "%dh%02dm", (int)(s / 3600.0), ((int)s / 60) % 60);
}

/* Moves the cursor back over the progress block and clears it. */
static void progress_clear(run *r)
{
    if (!r->progress || r->drawn == 0) return;
    fprintf(stderr, "\r\033[%dA\033[J", r->drawn);
    r->drawn = 0;
}

/* One line per running target: name, bar, percentage, cells per second, time left. */
static void progress_draw(run *r)
{
    if (!r->progress) return;
    progress_clear(r);
    const int width = term_width() - 1;
    const double now = brm_now();
    for (size_t i = 0; i < r->job_count; i++) {
        job *j = r->jobs[i];
        if (j->state != JOB_RUNNING) continue;
        uint64_t done = atomic_load(&j->done), total = atomic_load(&j->total);
        double f = total ? (double)done / (double)total : 0.0;
        double el = now - j->t_start;
        char rate[16], left[16], name[160];
        snprintf(name, sizeof name, "%.63s/%.63s", j->scene_name, j->name);
        char tail[96];
        if (done == 0) {
            /* Before the first bricks: voxelizing, shadow maps. */
            snprintf(tail, sizeof tail, "  0%%  preparing, %d thread%s", j->width, j->width > 1 ? "s" : "");
        } else {
            /* The rate over the bricks seen so far (the first sighting starts the clock), or
             * over the whole run until there are two sightings. */
            if (j->t_first == 0.0) {
                j->t_first = now;
                j->done_first = done;
            }
            double rt = now - j->t_first > 0.1 && done > j->done_first
                            ? (double)(done - j->done_first) / (now - j->t_first)
                            : el > 0.0 ? (double)done / el : 0.0;
            fmt_rate(rate, sizeof rate, rt);
            fmt_time(left, sizeof left, rt > 0.0 ? (double)(total - done) / rt : -1.0);
            snprintf(tail, sizeof tail, "%3.0f%%  %s cells/s  %s left", f * 100.0, rate, left);
        }
        /* Fit the terminal: shrink the bar, then the name, then drop the bar, then cut. */
        int namew = (int)strlen(name), barw = 20;
        if (namew > 24) namew = 24;
        if (namew < 12) namew = 12;
        const int tl = (int)strlen(tail);
        while (2 + namew + 3 + barw + 2 + tl > width && barw > 8) barw--;
        while (2 + namew + 3 + barw + 2 + tl > width && namew > 8) namew--;
        if (2 + namew + 3 + barw + 2 + tl > width) barw = 0;
        int filled = (int)(f * barw + 0.5);
        char bar[24];
        for (int k = 0; k < barw; k++) bar[k] = k < filled ? '#' : '.';
        bar[barw] = '\0';
        if (barw == 0) {
            char plain[256];
            snprintf(plain, sizeof plain, "  %-*.*s  %s", namew, namew, name, tail);
            if ((int)strlen(plain) > width) plain[width > 0 ? width : 0] = '\0';
            fprintf(stderr, "%s\n", plain);
        } else if (r->color_err) {
            fprintf(stderr, "  %-*.*s [" C_GREEN "%.*s" C_DIM "%s" C_RESET "]  %s\n", namew, namew, name, filled, bar,
                    bar + filled, tail);
        } else {
            fprintf(stderr, "  %-*.*s [%s]  %s\n", namew, namew, name, bar, tail);
        }
        r->drawn++;
    }
    fflush(stderr);
}

/* Results go to stdout, warnings and errors to stderr; the progress block is redrawn after. */
static void show_result(run *r, const job *j)
{
    progress_clear(r);
    if (j->scene) {
        for (uint32_t w = 0; w < j->warnings.count; w++)
            fprintf(stderr, "brume: %swarning%s: %s\n", r->color_err ? C_YELLOW : "", r->color_err ? C_RESET : "",
                    j->warnings.items[w]);
    }
    if (j->error && !j->not_started) fprintf(stderr, "brume: %s\n", j->error);
    fflush(stderr);
    if (!r->quiet && j->scene && !j->not_started) {
        const char *c0 = r->color_out ? status_color(j->status) : "", *c1 = r->color_out ? C_RESET : "";
        if (strcmp(j->status, "baked") == 0)
            printf("%sbaked%s       %s/%s  %llu cells in %.2f s, %.1f KiB  %s\n", c0, c1, j->scene_name, j->name,
                   (unsigned long long)j->cells, j->seconds, (double)j->bytes / 1024.0, j->output);
        else if (strcmp(j->status, "up-to-date") == 0)
            printf("%s%-11s%s %s/%s  %s\n", c0, j->status, c1, j->scene_name, j->name, j->output);
        else
            printf("%s%-11s%s %s/%s\n", c0, j->status, c1, j->scene_name, j->name);
        fflush(stdout);
    }
}

/* ---- up to date ------------------------------------------------------------------------- */

/* The input hash recorded in an existing volume, or "" when there is none (or it is not a
 * sound volume). The file is mapped, so only its header, tables and metadata are read. */
static void existing_hash(const char *path, char out[65])
{
    out[0] = '\0';
    int fd = open(path, O_RDONLY);
    if (fd < 0) return;
    struct stat st;
    if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode) || st.st_size <= 0) {
        close(fd);
        return;
    }
    void *map = mmap(NULL, (size_t)st.st_size, PROT_READ, MAP_PRIVATE, fd, 0);
    close(fd);
    if (map == MAP_FAILED) return;
    brv_volume *v = NULL;
    if (brv_open_memory(map, (size_t)st.st_size, NULL, &v) == BRV_OK) {
        size_t len = 0;
        const char *m = brv_metadata(v, &len);
        cJSON *j = m ? cJSON_ParseWithLength(m, len) : NULL;
        const cJSON *h = cJSON_GetObjectItemCaseSensitive(j, "input_hash");
        if (cJSON_IsString(h) && strlen(h->valuestring) == 64) memcpy(out, h->valuestring, 65);
        cJSON_Delete(j);
        brv_free(v);
    }
    munmap(map, (size_t)st.st_size);
}

static bool wanted(const run *r, const char *name)
{
    if (r->target_count == 0) return true;
    for (int i = 0; i < r->target_count; i++)
        if (strcmp(r->targets[i], name) == 0) return true;
    return false;
}

/* ---- planning --------------------------------------------------------------------------- */

/* A thread's worth of work: about a quarter of a second of lighting on one core (measured on
 * the demo scene's world target: about a million sample-light evaluations per second and
 * core, voxelizing and shadow maps included). Smaller targets run one thread each, several at
 * once; bigger ones get up to every thread. */
#define WORK_PER_THREAD ((uint64_t)1 << 18)

static int job_width(const run *r, const job *j)
{
    uint64_t w = (j->work + WORK_PER_THREAD - 1) / WORK_PER_THREAD;
    const brm_target *tg = &j->scene->targets[j->target];
    if (tg->grid != BRM_GRID_PROBES) {
        /* Bricks (frustum: columns of bricks) are what threads share. */
        uint64_t bx = (tg->cells[0] + 15u) / 16u, by = (tg->cells[1] + 15u) / 16u, bz = (tg->cells[2] + 15u) / 16u;
        uint64_t units = tg->grid == BRM_GRID_FRUSTUM ? bx * by : bx * by * bz;
        if (w > units) w = units;
    }
    if (w < 1) w = 1;
    if (w > (uint64_t)r->threads) w = (uint64_t)r->threads;
    return (int)w;
}

/* The refusal of a target over the budget, with the size that would fit: the target scaled
 * down evenly (cells on every axis, or for probes the spacing up) until the estimate fits,
 * found by bisection on the scale since the estimate is not proportional to the cells (shadow
 * maps and the fixed part are not). Returns a malloc'd message. */
static char *budget_message(const brm_scene *s, uint32_t t, const brm_bake_opts *o, uint64_t budget, uint64_t est)
{
    const brm_target *tg = &s->targets[t];
    brm_scene copy = *s;
    brm_target *targets = malloc(s->target_count * sizeof *targets);
    char *msg = malloc(1024);
    if (!targets || !msg) {
        free(targets);
        free(msg);
        return NULL;
    }
    memcpy(targets, s->targets, s->target_count * sizeof *targets);
    copy.targets = targets;
    brm_target *mt = &targets[t];
    const bool probes = tg->grid == BRM_GRID_PROBES;
    double lo = 0.0, hi = 1.0;
    bool any = false;
    brm_target best = *tg;
    for (int it = 0; it < 40; it++) {
        double k = 0.5 * (lo + hi);
        *mt = *tg;
        if (probes) {
            mt->spacing_m = tg->spacing_m / k;
        } else {
            for (int a = 0; a < 3; a++) {
                double c = floor((double)tg->cells[a] * k);
                mt->cells[a] = c < 1.0 ? 1u : (uint32_t)c;
            }
        }
        if (brm_bake_estimate_memory(&copy, t, o) <= budget) {
            lo = k;
            any = true;
            best = *mt;
        } else {
            hi = k;
        }
    }
    copy.targets = targets;
    targets[t] = best;
    const uint64_t have = probes ? brm_cli_target_work(s, t) / ((uint64_t)tg->rays * (s->light_count + 1u + (s->sky.present ? 1u : 0u)))
                                 : (uint64_t)tg->cells[0] * tg->cells[1] * tg->cells[2];
    const uint64_t fit = probes ? (any ? brm_cli_target_work(&copy, t) / ((uint64_t)tg->rays * (s->light_count + 1u + (s->sky.present ? 1u : 0u))) : 0)
                                : (any ? (uint64_t)best.cells[0] * best.cells[1] * best.cells[2] : 0);
    int n = snprintf(msg, 1024, "%s: %s (\"%s\"): estimated peak memory %.1f MiB is over the budget of %.1f MiB; ",
                     s->path, tg->json_path, tg->name, (double)est / 1048576.0, (double)budget / 1048576.0);
    if (n < 0) n = 0;
    if (!any)
        snprintf(msg + n, 1024 - (size_t)n, "even the smallest %s is over it: raise --max-memory",
                 probes ? "probe lattice" : "grid");
    else if (probes)
        snprintf(msg + n, 1024 - (size_t)n,
                 "about %llu probes would fit (this target has %llu), e.g. \"spacing_m\": %.3g: raise "
                 "\"spacing_m\" or --max-memory",
                 (unsigned long long)fit, (unsigned long long)have, best.spacing_m);
    else
        snprintf(msg + n, 1024 - (size_t)n,
                 "about %llu cells would fit (this target has %llu), e.g. \"cells\": [%u, %u, %u]: lower "
                 "\"cells\" or raise --max-memory",
                 (unsigned long long)fit, (unsigned long long)have, best.cells[0], best.cells[1], best.cells[2]);
    free(targets);
    return msg;
}

/* ---- running ---------------------------------------------------------------------------- */

static void on_progress(void *user, uint64_t done, uint64_t total)
{
    job *j = user;
    atomic_store(&j->total, total);
    atomic_store(&j->done, done);
}

static void *job_main(void *arg)
{
    job *j = arg;
    run *r = j->run;
    brm_bake_opts o = r->opts;
    o.threads = j->width;
    o.progress = on_progress;
    o.progress_user = j;
    brm_diag *d = malloc(sizeof *d);
    brm_bake_stats stats;
    memset(&stats, 0, sizeof stats);
    brm_status st;
    if (!d) {
        st = BRM_E_NOMEM;
    } else {
        brm_diag_init(d);
        st = brm_bake_target(j->scene, j->target, &o, j->output, &stats, d);
    }
    pthread_mutex_lock(&r->lock);
    j->seconds = stats.seconds;
    if (st == BRM_OK) {
        j->status = "baked";
        j->cells = stats.cells;
        j->bytes = stats.bytes;
    } else {
        /* Every message names the scene file (the grid's messages give only the JSON path). */
        const char *msg = d ? d->message : "out of memory";
        size_t pl = strlen(j->scene->path);
        if (strncmp(msg, j->scene->path, pl) == 0 && msg[pl] == ':') {
            job_fail(j, st, msg);
        } else {
            char *full = malloc(pl + strlen(msg) + 3);
            if (full) sprintf(full, "%s: %s", j->scene->path, msg);
            job_fail(j, st, full ? full : msg);
            free(full);
        }
    }
    if (d)
        for (uint32_t w = 0; w < d->warning_count; w++) str_push(&j->warnings, d->warnings[w]);
    j->state = JOB_DONE;
    pthread_cond_signal(&r->cond);
    pthread_mutex_unlock(&r->lock);
    free(d);
    return NULL;
}

static int cmp_width(const void *a, const void *b)
{
    const job *x = *(job *const *)a, *y = *(job *const *)b;
    if (x->width != y->width) return x->width > y->width ? -1 : 1;
    return x->seq < y->seq ? -1 : x->seq > y->seq;
}

/* Bakes the pending jobs. Wide jobs start first (they take every thread), the narrow ones
 * then share the threads; a job starts only when its threads are free and the estimates of
 * the jobs running with it fit the budget together (a job alone is always started: the
 * driver itself refuses it when it is over the budget). Returns when every job has finished
 * or, after an interrupt or a --fail-fast failure, every started one has. */
static void bake_all(run *r, job **queue, size_t nq)
{
    qsort(queue, nq, sizeof *queue, cmp_width);
    size_t next = 0;
    bool stop = false;
    double last_draw = 0.0;
    pthread_mutex_lock(&r->lock);
    for (;;) {
        /* Report the ones that finished. */
        for (size_t i = 0; i < r->job_count; i++) {
            job *j = r->jobs[i];
            if (j->state != JOB_DONE) continue;
            pthread_mutex_unlock(&r->lock);
            pthread_join(j->tid, NULL);
            pthread_mutex_lock(&r->lock);
            j->state = JOB_SHOWN;
            r->running--;
            r->threads_used -= j->width;
            r->memory_used -= j->est_memory;
            if (j->st != BRM_OK && r->fail_fast) stop = true;
            show_result(r, j);
            last_draw = 0.0;
        }
        if (interrupted()) stop = true;
        /* Start what fits. */
        while (!stop && next < nq) {
            job *j = queue[next];
            bool fits = r->running == 0 ||
                        (r->threads_used + j->width <= r->threads && r->memory_used + j->est_memory <= r->budget);
            if (!fits) break;
            brm_diag dd;
            brm_diag_init(&dd);
            const char *slash = strrchr(j->output, '/');
            char dir[BRM_PATH_MAX];
            snprintf(dir, sizeof dir, "%.*s", slash ? (int)(slash - j->output) : 1, slash ? j->output : ".");
            next++;
            if (brm_mkdirs(dir, &dd) != BRM_OK) {
                job_fail(j, dd.status, dd.message);
                j->state = JOB_SHOWN;
                show_result(r, j);
                if (r->fail_fast) stop = true;
                continue;
            }
            j->t_start = brm_now();
            j->state = JOB_RUNNING;
            if (pthread_create(&j->tid, NULL, job_main, j) != 0) {
                job_fail(j, BRM_E_NOMEM, "cannot start a thread");
                j->state = JOB_SHOWN;
                show_result(r, j);
                continue;
            }
            r->running++;
            r->threads_used += j->width;
            r->memory_used += j->est_memory;
            last_draw = 0.0;
        }
        if (r->running == 0 && (stop || next == nq)) break;
        double now = brm_now();
        if (r->progress && now - last_draw >= 0.2) {
            progress_draw(r);
            last_draw = now;
        }
        /* Wake on a finished job, or after 0.1 s to redraw and to notice an interrupt. */
        struct timespec ts;
        clock_gettime(CLOCK_REALTIME, &ts);
        ts.tv_nsec += 100000000L;
        if (ts.tv_nsec >= 1000000000L) {
            ts.tv_sec++;
            ts.tv_nsec -= 1000000000L;
        }
        bool any_done = false;
        for (size_t i = 0; i < r->job_count && !any_done; i++) any_done = r->jobs[i]->state == JOB_DONE;
        if (!any_done) pthread_cond_timedwait(&r->cond, &r->lock, &ts);
    }
    pthread_mutex_unlock(&r->lock);
    progress_clear(r);
    /* Whatever never started. */
    for (; next < nq; next++) {
        job *j = queue[next];
        j->not_started = true;
        if (interrupted())
            job_fail(j, BRM_E_INTERRUPTED, "not started: the bake was interrupted");
        else
            job_fail(j, BRM_E_IO, "not started: an earlier target failed and --fail-fast is set");
        j->state = JOB_SHOWN;
    }
}

/* ---- the report ------------------------------------------------------------------------- */

static int write_report(const run *r)
{
    cJSON *root = cJSON_CreateObject();
    cJSON *arr = cJSON_AddArrayToObject(root, "targets");
    for (size_t i = 0; i < r->job_count; i++) {
        const job *j = r->jobs[i];
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "scene", j->scene_name);
        if (j->scene) cJSON_AddStringToObject(o, "name", j->name);
        else cJSON_AddNullToObject(o, "name");
        cJSON_AddStringToObject(o, "status", j->status ? j->status : "failed");
        cJSON_AddNumberToObject(o, "seconds", j->seconds);
        cJSON_AddNumberToObject(o, "cells", (double)j->cells);
        if (j->scene && j->status && (strcmp(j->status, "baked") == 0 || strcmp(j->status, "up-to-date") == 0))
            cJSON_AddStringToObject(o, "output", j->output);
        else
            cJSON_AddNullToObject(o, "output");
        cJSON_AddNumberToObject(o, "bytes", (double)j->bytes);
        cJSON *w = cJSON_AddArrayToObject(o, "warnings");
        for (uint32_t k = 0; k < j->warnings.count; k++) cJSON_AddItemToArray(w, cJSON_CreateString(j->warnings.items[k]));
        if (j->error) cJSON_AddStringToObject(o, "error", j->error);
        else cJSON_AddNullToObject(o, "error");
        cJSON_AddItemToArray(arr, o);
    }
    char *text = cJSON_Print(root);
    cJSON_Delete(root);
    brm_diag d;
    brm_diag_init(&d);
    if (!text) {
        brm_cli_error("%s: out of memory for the report", r->report_path);
        return BRM_EXIT_IO;
    }
    size_t n = strlen(text);
    char *withnl = malloc(n + 2);
    brm_status st = BRM_E_NOMEM;
    if (withnl) {
        memcpy(withnl, text, n);
        withnl[n] = '\n';
        /* The report's folder is made like the outputs' folders. */
        const char *slash = strrchr(r->report_path, '/');
        st = BRM_OK;
        if (slash && slash != r->report_path) {
            char dir[BRM_PATH_MAX];
            snprintf(dir, sizeof dir, "%.*s", (int)(slash - r->report_path), r->report_path);
            st = brm_mkdirs(dir, &d);
        }
        if (st == BRM_OK) st = brm_write_file_atomic(r->report_path, withnl, n + 1, &d);
    }
    cJSON_free(text);
    free(withnl);
    if (st != BRM_OK) {
        brm_cli_error("%s", d.status != BRM_OK ? d.message : "out of memory for the report");
        return BRM_EXIT_IO;
    }
    return BRM_EXIT_OK;
}

/* ---- the command ------------------------------------------------------------------------ */

static int parse_args(run *r, int argc, char **argv, brm_path_list *scenes, bool *help_shown)
{
    for (int i = 1; i < argc; i++) {
        const char *v;
        int k;
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            fputs(help, stdout);
            *help_shown = true;
            return BRM_EXIT_OK;
        } else if (brm_cli_flag(argv, i, "--force")) {
            r->force = true;
        } else if (brm_cli_flag(argv, i, "--quiet") || brm_cli_flag(argv, i, "-q")) {
            r->quiet = true;
        } else if (brm_cli_flag(argv, i, "--reference")) {
            r->opts.reference = true;
        } else if (brm_cli_flag(argv, i, "--fail-fast")) {
            r->fail_fast = true;
        } else if ((k = brm_cli_opt("bake", argc, argv, &i, "-o", &v)) != 0) {
            if (k < 0) return BRM_EXIT_USAGE;
            if (!v[0]) return brm_cli_usage("bake", "-o wants a folder, not an empty string");
            r->out_dir = v;
        } else if ((k = brm_cli_opt("bake", argc, argv, &i, "--target", &v)) != 0) {
            if (k < 0) return BRM_EXIT_USAGE;
            r->targets[r->target_count++] = v;
        } else if ((k = brm_cli_opt("bake", argc, argv, &i, "--report", &v)) != 0) {
            if (k < 0) return BRM_EXIT_USAGE;
            if (!v[0]) return brm_cli_usage("bake", "--report wants a file name, not an empty string");
            r->report_path = v;
        } else if ((k = brm_cli_opt("bake", argc, argv, &i, "-j", &v)) != 0 ||
                   (strncmp(argv[i], "-j", 2) == 0 && argv[i][2] >= '0' && argv[i][2] <= '9' && (v = argv[i] + 2, k = 1))) {
            uint32_t n;
            if (k < 0) return BRM_EXIT_USAGE;
            if (!brm_cli_parse_u32(v, &n) || n == 0 || n > 1024)
                return brm_cli_usage("bake", "-j wants a thread count 1..1024, not '%s'", v);
            r->opts.threads = (int)n;
        } else if ((k = brm_cli_opt("bake", argc, argv, &i, "--max-memory", &v)) != 0) {
            uint64_t n;
            if (k < 0) return BRM_EXIT_USAGE;
            if (!brm_cli_parse_size(v, &n) || n == 0)
                return brm_cli_usage("bake", "--max-memory wants bytes with an optional K, M or G suffix, not '%s'", v);
            r->opts.max_memory = n;
        } else if (argv[i][0] == '-' && argv[i][1] != '\0') {
            return brm_cli_usage("bake", "unknown option '%s'", argv[i]);
        } else {
            int c = brm_collect_scenes(scenes, argv[i]);
            if (c == -2) {
                brm_cli_error("out of memory");
                return BRM_EXIT_IO;
            }
            if (c == -1) return BRM_EXIT_INPUT;
        }
    }
    if (scenes->count == 0) return brm_cli_usage("bake", "no scene given");
    return BRM_EXIT_OK;
}

/* Entries for every wanted target of the loaded scenes, in input order; -1 on no memory. */
static int plan_jobs(run *r, brm_scene **loaded, const brm_path_list *scenes, brm_diag *load_diags)
{
    for (size_t i = 0; i < scenes->count; i++) {
        brm_scene *s = loaded[i];
        if (!s) {
            job *j = add_job(r);
            if (!j) return -1;
            snprintf(j->scene_name, sizeof j->scene_name, "%s", scenes->items[i]);
            job_fail(j, load_diags[i].status, load_diags[i].message);
            j->state = JOB_SHOWN;
            continue;
        }
        /* With several scenes, outputs go by scene name: two scenes of one name would collide. */
        const brm_scene *twin = NULL;
        for (size_t k = 0; k < i && scenes->count > 1; k++)
            if (loaded[k] && strcmp(loaded[k]->name, s->name) == 0) twin = loaded[k];
        if (twin) {
            job *j = add_job(r);
            if (!j) return -1;
            snprintf(j->scene_name, sizeof j->scene_name, "%s", s->path);
            char msg[BRM_PATH_MAX * 2 + 256];
            snprintf(msg, sizeof msg,
                     "%s: name: \"%s\" is also the name of %s; with several scenes the outputs go to "
                     "DIR/<scene name>/, so give each scene its own \"name\"",
                     s->path, s->name, twin->path);
            job_fail(j, BRM_E_INPUT, msg);
            j->state = JOB_SHOWN;
            brm_scene_free(s);
            loaded[i] = NULL;
            continue;
        }
        char dir[BRM_PATH_MAX];
        const char *base = r->out_dir ? r->out_dir : "out";
        if (scenes->count == 1 && r->out_dir) snprintf(dir, sizeof dir, "%s", base);
        else snprintf(dir, sizeof dir, "%s/%s", base, s->name);
        brm_diag sw;
        brm_diag_init(&sw);
        brm_diag_merge_warnings(&sw, &load_diags[i]);
        brm_scene_warnings(s, &sw);
        for (uint32_t t = 0; t < s->target_count; t++) {
            const brm_target *tg = &s->targets[t];
            if (!wanted(r, tg->name)) continue;
            job *j = add_job(r);
            if (!j) return -1;
            j->scene = s;
            j->target = t;
            snprintf(j->scene_name, sizeof j->scene_name, "%s", s->name);
            snprintf(j->name, sizeof j->name, "%s", tg->name);
            size_t dl = strlen(dir);
            if (dl + strlen(tg->name) + 6 > sizeof j->output) {
                job_fail(j, BRM_E_IO, "the output folder's path is too long");
                j->state = JOB_SHOWN;
                j->scene = NULL;
                continue;
            }
            memcpy(j->output, dir, dl);
            j->output[dl] = '/';
            memcpy(j->output + dl + 1, tg->name, strlen(tg->name));
            memcpy(j->output + dl + 1 + strlen(tg->name), ".brv", 5);
            j->cells = tg->grid == BRM_GRID_PROBES ? 0 : (uint64_t)tg->cells[0] * tg->cells[1] * tg->cells[2];
            for (uint32_t w = 0; w < sw.warning_count; w++) str_push(&j->warnings, sw.warnings[w]);
        }
    }
    return 0;
}

int brm_cmd_bake(int argc, char **argv)
{
    run r;
    memset(&r, 0, sizeof r);
    brm_path_list scenes = {0};
    brm_scene **loaded = NULL;
    brm_diag *load_diags = NULL;
    job **queue = NULL;
    int rc = BRM_EXIT_OK;
    bool help_shown = false;
    const double t0 = brm_now();
    pthread_mutex_init(&r.lock, NULL);
    pthread_cond_init(&r.cond, NULL);
    r.targets = calloc((size_t)argc, sizeof *r.targets);
    if (!r.targets) return BRM_EXIT_IO;
    if ((rc = parse_args(&r, argc, argv, &scenes, &help_shown)) != BRM_EXIT_OK || help_shown) goto out;

    r.threads = r.opts.threads > 0 ? r.opts.threads : brm_cpu_count();
    r.budget = r.opts.max_memory ? r.opts.max_memory : brm_default_memory_budget();
    r.progress = !r.quiet && isatty(STDERR_FILENO);
    r.color_err = r.progress && want_color(STDERR_FILENO);
    r.color_out = !r.quiet && want_color(STDOUT_FILENO);
    install_signals();
    r.opts.cancel = &brm_interrupted;

    /* Load every scene first: a broken scene fails alone, before any baking starts. */
    loaded = calloc(scenes.count, sizeof *loaded);
    load_diags = malloc(scenes.count * sizeof *load_diags);
    if (!loaded || !load_diags) {
        brm_cli_error("out of memory");
        rc = BRM_EXIT_IO;
        goto out;
    }
    for (size_t i = 0; i < scenes.count; i++) {
        brm_diag_init(&load_diags[i]);
        if (interrupted())
            brm_diag_error(&load_diags[i], BRM_E_INTERRUPTED, "%s: not loaded: the bake was interrupted",
                           scenes.items[i]);
        else if (brm_scene_load(scenes.items[i], &loaded[i], &load_diags[i]) != BRM_OK)
            loaded[i] = NULL;
    }
    /* --target names must exist in some scene that loaded (or in one that did not). */
    bool any_failed_load = false;
    for (size_t i = 0; i < scenes.count; i++) any_failed_load |= loaded[i] == NULL;
    for (int k = 0; k < r.target_count && !any_failed_load; k++) {
        bool found = false;
        for (size_t i = 0; i < scenes.count && !found; i++) found = brm_scene_find_target(loaded[i], r.targets[k]) >= 0;
        if (!found) {
            rc = brm_cli_usage("bake", "no scene has a target named '%s'", r.targets[k]);
            goto out;
        }
    }
    if (plan_jobs(&r, loaded, &scenes, load_diags) != 0) {
        brm_cli_error("out of memory");
        rc = BRM_EXIT_IO;
        goto out;
    }
    free(load_diags);
    load_diags = NULL;

    /* Failed scenes are reported now; for the others: up to date, or queued. */
    queue = calloc(r.job_count + 1, sizeof *queue);
    if (!queue) {
        brm_cli_error("out of memory");
        rc = BRM_EXIT_IO;
        goto out;
    }
    size_t nq = 0;
    bool stop = false;
    for (size_t i = 0; i < r.job_count; i++) {
        job *j = r.jobs[i];
        if (!j->scene) {
            show_result(&r, j);
            if (r.fail_fast) stop = true;
            continue;
        }
        if (stop || interrupted()) {
            queue[nq++] = j;
            continue;
        }
        brm_diag tw;
        brm_diag_init(&tw);
        brm_target_warnings(j->scene, j->target, &r.opts, &tw);
        for (uint32_t w = 0; w < tw.warning_count; w++) str_push(&j->warnings, tw.warnings[w]);
        brm_bake_input_hash(j->scene, j->target, &r.opts, j->hash);
        if (!r.force) {
            char have[65];
            existing_hash(j->output, have);
            if (have[0] && strcmp(have, j->hash) == 0) {
                struct stat st;
                j->status = "up-to-date";
                if (stat(j->output, &st) == 0) j->bytes = (uint64_t)st.st_size;
                j->state = JOB_SHOWN;
                show_result(&r, j);
                continue;
            }
        }
        j->work = brm_cli_target_work(j->scene, j->target);
        j->width = job_width(&r, j);
        brm_bake_opts eo = r.opts;
        eo.threads = j->width;
        j->est_memory = brm_bake_estimate_memory(j->scene, j->target, &eo);
        if (j->est_memory > r.budget && j->width > 1) {
            /* The brick buffers grow with the threads: one thread may fit where several do not. */
            eo.threads = 1;
            uint64_t one = brm_bake_estimate_memory(j->scene, j->target, &eo);
            if (one <= r.budget) {
                j->width = 1;
                j->est_memory = one;
            }
        }
        if (j->est_memory > r.budget) {
            char *msg = budget_message(j->scene, j->target, &eo, r.budget, j->est_memory);
            job_fail(j, BRM_E_BUDGET, msg ? msg : "over the memory budget");
            free(msg);
            j->state = JOB_SHOWN;
            show_result(&r, j);
            if (r.fail_fast) stop = true;
            continue;
        }
        queue[nq++] = j;
    }
    if (stop || interrupted()) {
        for (size_t i = 0; i < nq; i++) {
            queue[i]->not_started = true;
            job_fail(queue[i], interrupted() ? BRM_E_INTERRUPTED : BRM_E_IO,
                     interrupted() ? "not started: the bake was interrupted"
                                   : "not started: an earlier target failed and --fail-fast is set");
        }
    } else {
        bake_all(&r, queue, nq);
    }

    /* The exit status: that of the first failure in input order; 3 after an interrupt. */
    size_t nb = 0, nu = 0, nf = 0, ni = 0, ns = 0;
    rc = BRM_EXIT_OK;
    for (size_t i = 0; i < r.job_count; i++) {
        const job *j = r.jobs[i];
        const char *s = j->status ? j->status : "failed";
        if (j->not_started) ns++;
        else if (strcmp(s, "baked") == 0) nb++;
        else if (strcmp(s, "up-to-date") == 0) nu++;
        else if (strcmp(s, "interrupted") == 0) ni++;
        else nf++;
        if (rc == BRM_EXIT_OK && j->st != BRM_OK && !j->not_started) rc = brm_status_exit_code(j->st);
    }
    if (interrupted()) rc = BRM_EXIT_IO;
    if (r.report_path) {
        int rr = write_report(&r);
        if (rc == BRM_EXIT_OK) rc = rr;
    }
    if (interrupted()) brm_atomic_cleanup_all();
    {
        char extra[96] = "";
        if (ni || ns) snprintf(extra, sizeof extra, ", %zu interrupted, %zu not started", ni, ns);
        fprintf(stderr, "brume: %zu baked, %zu up to date, %zu failed%s in %.2f s%s\n", nb, nu, nf, extra,
                brm_now() - t0, interrupted() ? " (interrupted)" : "");
    }

out:
    if (loaded)
        for (size_t i = 0; i < scenes.count; i++) brm_scene_free(loaded[i]);
    free(loaded);
    free(load_diags);
    free(queue);
    for (size_t i = 0; i < r.job_count; i++) {
        str_free(&r.jobs[i]->warnings);
        free(r.jobs[i]->error);
        free(r.jobs[i]);
    }
    free(r.jobs);
    brm_path_list_free(&scenes);
    free(r.targets);
    pthread_cond_destroy(&r.cond);
    pthread_mutex_destroy(&r.lock);
    return rc;
}
