#include "cli/scenes.h"

#include <cJSON.h>
#include <dirent.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "base/atomic_file.h"
#include "cli/cli.h"
#include "scene/scene.h"

static int push(brm_path_list *l, const char *p)
{
    if (l->count == l->cap) {
        size_t nc = l->cap ? l->cap * 2 : 16;
        char **ni = realloc(l->items, nc * sizeof *ni);
        if (!ni) return -2;
        l->items = ni;
        l->cap = nc;
    }
    size_t n = strlen(p) + 1;
    l->items[l->count] = malloc(n);
    if (!l->items[l->count]) return -2;
    memcpy(l->items[l->count++], p, n);
    return 0;
}

/* The same file already listed (by device and inode)? */
static bool listed(const brm_path_list *l, const char *p)
{
    struct stat a, b;
    if (stat(p, &a) != 0) {
        for (size_t i = 0; i < l->count; i++)
            if (strcmp(l->items[i], p) == 0) return true;
        return false;
    }
    for (size_t i = 0; i < l->count; i++)
        if (stat(l->items[i], &b) == 0 && a.st_dev == b.st_dev && a.st_ino == b.st_ino) return true;
    return false;
}

static int push_unique(brm_path_list *l, const char *p) { return listed(l, p) ? 0 : push(l, p); }

static int cmp_str(const void *a, const void *b) { return strcmp(*(char *const *)a, *(char *const *)b); }

/* In a folder, a JSON file that parses but has no top-level "brume" key is not a scene. */
static bool looks_like_scene(const char *path)
{
    char *text = NULL;
    size_t len = 0;
    if (brm_read_file(path, &text, &len, NULL) != BRM_OK) return true;
    cJSON *j = cJSON_ParseWithLength(text, len);
    bool scene = j == NULL || (cJSON_IsObject(j) && cJSON_GetObjectItemCaseSensitive(j, "brume") != NULL);
    cJSON_Delete(j);
    free(text);
    return scene;
}

static int walk(brm_path_list *l, const char *dir, size_t *found)
{
    DIR *d = opendir(dir);
    if (!d) return 0;
    brm_path_list here = {0};
    struct dirent *e;
    int rc = 0;
    while (rc == 0 && (e = readdir(d)) != NULL) {
        if (e->d_name[0] == '.') continue;
        char p[BRM_PATH_MAX];
        int n = snprintf(p, sizeof p, "%s%s%s", dir, dir[strlen(dir) - 1] == '/' ? "" : "/", e->d_name);
        if (n < 0 || (size_t)n >= sizeof p) continue;
        rc = push(&here, p);
    }
    closedir(d);
    /* Sorted, so a folder bakes in the same order everywhere. */
    if (here.count) qsort(here.items, here.count, sizeof *here.items, cmp_str);
    for (size_t i = 0; i < here.count && rc == 0; i++) {
        struct stat st;
        if (stat(here.items[i], &st) != 0) continue;
        size_t n = strlen(here.items[i]);
        if (S_ISDIR(st.st_mode)) {
            rc = walk(l, here.items[i], found);
        } else if (n > 5 && strcmp(here.items[i] + n - 5, ".json") == 0 && looks_like_scene(here.items[i])) {
            (*found)++;
            rc = push_unique(l, here.items[i]);
        }
    }
    brm_path_list_free(&here);
    return rc;
}

int brm_collect_scenes(brm_path_list *l, const char *path)
{
    struct stat st;
    if (stat(path, &st) == 0 && S_ISDIR(st.st_mode)) {
        size_t found = 0;
        int rc = walk(l, path, &found);
        if (rc == 0 && found == 0) {
            brm_cli_error("%s: no scene in this folder (looked for *.json files with a \"brume\" key, in "
                          "subfolders too); name a scene file or another folder",
                          path);
            return -1;
        }
        return rc;
    }
    /* A missing file is kept: the loader reports it with its own message. */
    return push_unique(l, path);
}

void brm_path_list_free(brm_path_list *l)
{
    for (size_t i = 0; i < l->count; i++) free(l->items[i]);
    free(l->items);
    l->items = NULL;
    l->count = l->cap = 0;
}

uint64_t brm_cli_target_work(const brm_scene *s, uint32_t t)
{
    const brm_target *tg = &s->targets[t];
    const uint64_t lights = s->light_count + 1u + (s->sky.present ? 1u : 0u);
    if (tg->grid == BRM_GRID_PROBES) {
        /* n = floor((max − min)/spacing + 1e-6) + 1 per axis (SPEC.md, probes). */
        double sz[3] = {tg->box.max.x - tg->box.min.x, tg->box.max.y - tg->box.min.y, tg->box.max.z - tg->box.min.z};
        uint64_t n = 1;
        for (int a = 0; a < 3; a++) n *= tg->spacing_m > 0.0 ? (uint64_t)(sz[a] / tg->spacing_m + 1e-6) + 1u : 1u;
        return n * tg->rays * lights;
    }
    uint64_t cells = (uint64_t)tg->cells[0] * tg->cells[1] * tg->cells[2];
    return cells * (tg->samples ? tg->samples : 1u) * lights;
}
