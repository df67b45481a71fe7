/* brume bake SCENE.json... — bake every target (or the named ones) into .brv volumes. */
#include <cJSON.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "bake/bake.h"
#include "base/atomic_file.h"
#include "base/threads.h"
#include "brume/brv.h"
#include "cli/cli.h"
#include "cli/scenes.h"
#include "scene/scene.h"

static const char *help =
    "usage: brume bake SCENE.json|FOLDER... [options]\n"
    "\n"
    "Bakes every target of each scene (folders are searched for *.json scenes). With one scene\n"
    "the volumes go to DIR/<target>.brv, DIR defaulting to out/<scene name>/; with several, to\n"
    "DIR/<scene name>/<target>.brv, DIR defaulting to out/. A target whose inputs (its part of\n"
    "the scene, the files it references, the settings, the tool version) are unchanged since its\n"
    "last bake is up to date and not baked again.\n"
    "\n"
    "  -o DIR              output folder\n"
    "  --target NAME       bake only this target (repeatable)\n"
    "  -j N                worker threads (default: all cores); results do not depend on N\n"
    "  --force             bake even targets that are up to date\n"
    "  --report FILE.json  write a machine-readable report of every target\n"
    "  --quiet             no progress, only the final summary\n"
    "  --reference         slow exact mode (ray-traced visibility, marched transmittance)\n"
    "  --max-memory SIZE   memory budget per target, bytes with optional K, M, G (default: half the RAM)\n"
    "  --fail-fast         stop at the first failing target\n"
    "\n"
    "Exit status: 0 all targets baked or up to date, 1 invalid input, 2 usage error, 3 I/O,\n"
    "over the memory budget or interrupted. With several failures, the status of the first.\n";

typedef struct report_entry {
    char scene[BRM_NAME_MAX];
    char name[BRM_NAME_MAX];
    const char *status;
    double seconds;
    uint64_t cells;
    char output[BRM_PATH_MAX + BRM_NAME_MAX + 8];
    uint64_t bytes;
    brm_diag diag;
} report_entry;

typedef struct bake_cli {
    const char *out_dir;
    const char **targets;
    int target_count;
    bool force, quiet, fail_fast, tty;
    const char *report_path;
    brm_bake_opts opts;
    report_entry *entries;
    size_t entry_count, entry_cap;
    int rc;
    double progress_last;
    const char *progress_name;
    double progress_t0;
} bake_cli;

static report_entry *add_entry(bake_cli *c)
{
    if (c->entry_count == c->entry_cap) {
        size_t nc = c->entry_cap ? c->entry_cap * 2 : 8;
        report_entry *ne = realloc(c->entries, nc * sizeof *ne);
        if (!ne) return NULL;
        c->entries = ne;
        c->entry_cap = nc;
    }
    report_entry *e = &c->entries[c->entry_count++];
    memset(e, 0, sizeof *e);
    brm_diag_init(&e->diag);
    return e;
}

static void fail_status(bake_cli *c, brm_status st)
{
    if (c->rc == BRM_EXIT_OK) c->rc = brm_status_exit_code(st);
}

/* Progress on a terminal: one line redrawn in place at most 5 times a second. */
static void on_progress(void *user, uint64_t done, uint64_t total)
{
    bake_cli *c = user;
    double now = brm_now();
    if (done < total && now - c->progress_last < 0.2) return;
    c->progress_last = now;
    double f = total ? (double)done / (double)total : 1.0;
    double el = now - c->progress_t0;
    double rate = el > 0 ? (double)done / el : 0.0;
    double left = rate > 0 ? (double)(total - done) / rate : 0.0;
    char bar[31];
    int filled = (int)(f * 30.0 + 0.5);
    for (int i = 0; i < 30; i++) bar[i] = i < filled ? '#' : '.';
    bar[30] = '\0';
    fprintf(stderr, "\r  %-20.20s [%s] %3.0f%%  %8.3g cells/s  %5.1f s left ", c->progress_name, bar, f * 100.0, rate,
            left);
    fflush(stderr);
}

/* The input hash stored in an existing volume, or "" when there is none. */
static void existing_hash(const char *path, char out[65])
{
    out[0] = '\0';
    brv_volume *v = NULL;
    if (access(path, F_OK) != 0 || brv_open_file(path, NULL, &v) != BRV_OK) return;
    size_t len = 0;
    const char *m = brv_metadata(v, &len);
    cJSON *j = m ? cJSON_ParseWithLength(m, len) : NULL;
    const cJSON *h = cJSON_GetObjectItemCaseSensitive(j, "input_hash");
    if (cJSON_IsString(h) && strlen(h->valuestring) == 64) memcpy(out, h->valuestring, 65);
    cJSON_Delete(j);
    brv_free(v);
}

static bool wanted(const bake_cli *c, const char *name)
{
    if (c->target_count == 0) return true;
    for (int i = 0; i < c->target_count; i++)
        if (strcmp(c->targets[i], name) == 0) return true;
    return false;
}

/* Bakes the wanted targets of one scene. Returns false when the run must stop. */
static bool bake_scene(bake_cli *c, const brm_scene *s, const char *dir)
{
    brm_diag dd;
    brm_diag_init(&dd);
    if (brm_mkdirs(dir, &dd) != BRM_OK) {
        report_entry *e = add_entry(c);
        if (!e) return false;
        snprintf(e->scene, sizeof e->scene, "%s", s->name);
        e->status = "failed";
        e->diag = dd;
        fprintf(stderr, "brume: %s\n", dd.message);
        fail_status(c, dd.status);
        return !c->fail_fast;
    }
    for (uint32_t t = 0; t < s->target_count; t++) {
        const brm_target *tg = &s->targets[t];
        if (!wanted(c, tg->name)) continue;
        report_entry *e = add_entry(c);
        if (!e) return false;
        snprintf(e->scene, sizeof e->scene, "%s", s->name);
        snprintf(e->name, sizeof e->name, "%s", tg->name);
        snprintf(e->output, sizeof e->output, "%s/%s.brv", dir, tg->name);
        e->cells = tg->grid == BRM_GRID_PROBES ? 0 : (uint64_t)tg->cells[0] * tg->cells[1] * tg->cells[2];
        if (!c->force) {
            char have[65], want[65];
            existing_hash(e->output, have);
            brm_bake_input_hash(s, t, &c->opts, want);
            if (have[0] && strcmp(have, want) == 0) {
                struct stat st;
                e->status = "up-to-date";
                if (stat(e->output, &st) == 0) e->bytes = (uint64_t)st.st_size;
                printf("up-to-date  %s/%s  %s\n", s->name, tg->name, e->output);
                continue;
            }
        }
        c->progress_name = tg->name;
        c->progress_t0 = brm_now();
        c->progress_last = 0;
        brm_bake_stats stats;
        brm_status st = brm_bake_target(s, t, &c->opts, e->output, &stats, &e->diag);
        if (c->tty && !c->quiet) fprintf(stderr, "\r\033[K");
        e->seconds = stats.seconds;
        if (st == BRM_OK) {
            e->status = "baked";
            e->cells = stats.cells;
            e->bytes = stats.bytes;
            printf("baked       %s/%s  %llu cells in %.2f s, %.1f KiB  %s\n", s->name, tg->name,
                   (unsigned long long)stats.cells, stats.seconds, (double)stats.bytes / 1024.0, e->output);
        } else {
            e->status = st == BRM_E_INTERRUPTED ? "interrupted" : "failed";
            fprintf(stderr, "brume: %s\n", e->diag.message);
            fail_status(c, st);
            if (st == BRM_E_INTERRUPTED || c->fail_fast) return false;
        }
        for (uint32_t w = 0; w < e->diag.warning_count; w++)
            fprintf(stderr, "brume: warning: %s/%s: %s\n", s->name, tg->name, e->diag.warnings[w]);
    }
    return true;
}

static int write_report(const bake_cli *c)
{
    cJSON *root = cJSON_CreateObject();
    cJSON *arr = cJSON_AddArrayToObject(root, "targets");
    for (size_t i = 0; i < c->entry_count; i++) {
        const report_entry *e = &c->entries[i];
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "scene", e->scene);
        cJSON_AddStringToObject(o, "name", e->name);
        cJSON_AddStringToObject(o, "status", e->status);
        cJSON_AddNumberToObject(o, "seconds", e->seconds);
        cJSON_AddNumberToObject(o, "cells", (double)e->cells);
        if (e->output[0] && strcmp(e->status, "failed") != 0 && strcmp(e->status, "interrupted") != 0)
            cJSON_AddStringToObject(o, "output", e->output);
        else
            cJSON_AddNullToObject(o, "output");
        cJSON_AddNumberToObject(o, "bytes", (double)e->bytes);
        cJSON *w = cJSON_AddArrayToObject(o, "warnings");
        for (uint32_t k = 0; k < e->diag.warning_count; k++) cJSON_AddItemToArray(w, cJSON_CreateString(e->diag.warnings[k]));
        if (e->diag.status != BRM_OK) cJSON_AddStringToObject(o, "error", e->diag.message);
        else cJSON_AddNullToObject(o, "error");
        cJSON_AddItemToArray(arr, o);
    }
    char *text = cJSON_Print(root);
    cJSON_Delete(root);
    if (!text) return BRM_EXIT_IO;
    size_t n = strlen(text);
    char *withnl = malloc(n + 2);
    if (!withnl) {
        cJSON_free(text);
        return BRM_EXIT_IO;
    }
    memcpy(withnl, text, n);
    withnl[n] = '\n';
    cJSON_free(text);
    brm_diag d;
    brm_diag_init(&d);
    brm_status st = brm_write_file_atomic(c->report_path, withnl, n + 1, &d);
    free(withnl);
    if (st != BRM_OK) {
        fprintf(stderr, "brume: %s\n", d.message);
        return brm_status_exit_code(st);
    }
    return BRM_EXIT_OK;
}

int brm_cmd_bake(int argc, char **argv)
{
    bake_cli c;
    memset(&c, 0, sizeof c);
    brm_path_list scenes = {0};
    const char **targets = calloc((size_t)argc, sizeof *targets);
    int rc = BRM_EXIT_OK;
    if (!targets) return BRM_EXIT_IO;
    c.targets = targets;
    for (int i = 1; i < argc; i++) {
        const char *v;
        int r;
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            fputs(help, stdout);
            goto out;
        } else if (brm_cli_flag(argv, i, "--force")) {
            c.force = true;
        } else if (brm_cli_flag(argv, i, "--quiet")) {
            c.quiet = true;
        } else if (brm_cli_flag(argv, i, "--reference")) {
            c.opts.reference = true;
        } else if (brm_cli_flag(argv, i, "--fail-fast")) {
            c.fail_fast = true;
        } else if ((r = brm_cli_opt("bake", argc, argv, &i, "-o", &v)) != 0) {
            if (r < 0) { rc = BRM_EXIT_USAGE; goto out; }
            c.out_dir = v;
        } else if ((r = brm_cli_opt("bake", argc, argv, &i, "--target", &v)) != 0) {
            if (r < 0) { rc = BRM_EXIT_USAGE; goto out; }
            targets[c.target_count++] = v;
        } else if ((r = brm_cli_opt("bake", argc, argv, &i, "--report", &v)) != 0) {
            if (r < 0) { rc = BRM_EXIT_USAGE; goto out; }
            c.report_path = v;
        } else if ((r = brm_cli_opt("bake", argc, argv, &i, "-j", &v)) != 0) {
            uint32_t n;
            if (r < 0) { rc = BRM_EXIT_USAGE; goto out; }
            if (!brm_cli_parse_u32(v, &n) || n == 0 || n > 1024) {
                rc = brm_cli_usage("bake", "-j wants a thread count 1..1024, not '%s'", v);
                goto out;
            }
            c.opts.threads = (int)n;
        } else if ((r = brm_cli_opt("bake", argc, argv, &i, "--max-memory", &v)) != 0) {
            uint64_t n;
            if (r < 0) { rc = BRM_EXIT_USAGE; goto out; }
            if (!brm_cli_parse_size(v, &n) || n == 0) {
                rc = brm_cli_usage("bake", "--max-memory wants bytes with an optional K, M or G suffix, not '%s'", v);
                goto out;
            }
            c.opts.max_memory = n;
        } else if (argv[i][0] == '-' && argv[i][1] != '\0') {
            rc = brm_cli_usage("bake", "unknown option '%s'", argv[i]);
            goto out;
        } else {
            brm_collect_scenes(&scenes, argv[i]);
        }
    }
    if (scenes.count == 0) {
        rc = brm_cli_usage("bake", "no scene given");
        goto out;
    }
    c.tty = isatty(STDERR_FILENO) && !c.quiet;
    if (c.tty) {
        c.opts.progress = on_progress;
        c.opts.progress_user = &c;
    }
    brm_install_interrupt_handlers();
    c.opts.cancel = &brm_interrupted;

    /* Load every scene first: a broken scene is reported before any baking starts. */
    brm_scene **loaded = calloc(scenes.count, sizeof *loaded);
    if (!loaded) { rc = BRM_EXIT_IO; goto out; }
    for (size_t i = 0; i < scenes.count; i++) {
        report_entry *e = add_entry(&c);
        brm_status st = e ? brm_scene_load(scenes.items[i], &loaded[i], &e->diag) : BRM_E_NOMEM;
        if (st != BRM_OK) {
            if (e) {
                e->status = "failed";
                fprintf(stderr, "brume: %s\n", e->diag.message);
            }
            fail_status(&c, st);
        } else {
            c.entry_count--; /* loaded fine: targets get their own entries */
            for (uint32_t w = 0; w < e->diag.warning_count; w++)
                fprintf(stderr, "brume: warning: %s\n", e->diag.warnings[w]);
        }
    }
    /* --target names must exist somewhere. */
    for (int k = 0; k < c.target_count; k++) {
        bool found = false;
        for (size_t i = 0; i < scenes.count && !found; i++)
            if (loaded[i] && brm_scene_find_target(loaded[i], targets[k]) >= 0) found = true;
        if (!found && c.rc == BRM_EXIT_OK) {
            rc = brm_cli_usage("bake", "no scene has a target named '%s'", targets[k]);
            for (size_t i = 0; i < scenes.count; i++) brm_scene_free(loaded[i]);
            free(loaded);
            goto out;
        }
    }
    bool go = !(c.fail_fast && c.rc != BRM_EXIT_OK);
    for (size_t i = 0; i < scenes.count && go; i++) {
        if (!loaded[i]) continue;
        char dir[BRM_PATH_MAX];
        if (scenes.count == 1) snprintf(dir, sizeof dir, "%s", c.out_dir ? c.out_dir : "out");
        else snprintf(dir, sizeof dir, "%s/%s", c.out_dir ? c.out_dir : "out", loaded[i]->name);
        if (scenes.count == 1 && !c.out_dir) snprintf(dir, sizeof dir, "out/%s", loaded[i]->name);
        go = bake_scene(&c, loaded[i], dir);
    }
    for (size_t i = 0; i < scenes.count; i++) brm_scene_free(loaded[i]);
    free(loaded);

    size_t nb = 0, nu = 0, nf = 0, ni = 0;
    for (size_t i = 0; i < c.entry_count; i++) {
        const char *s = c.entries[i].status;
        if (strcmp(s, "baked") == 0) nb++;
        else if (strcmp(s, "up-to-date") == 0) nu++;
        else if (strcmp(s, "interrupted") == 0) ni++;
        else nf++;
    }
    fprintf(stderr, "brume: %zu baked, %zu up to date, %zu failed%s\n", nb, nu, nf, ni ? ", interrupted" : "");
    if (c.report_path) {
        int rr = write_report(&c);
        if (rr != BRM_EXIT_OK && c.rc == BRM_EXIT_OK) c.rc = rr;
    }
    rc = c.rc;
    if (atomic_load(&brm_interrupted)) {
        brm_atomic_cleanup_all();
        rc = BRM_EXIT_IO;
    }
out:
    brm_path_list_free(&scenes);
    free(targets);
    free(c.entries);
    return rc;
}
