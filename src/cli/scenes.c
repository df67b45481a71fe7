#include "cli/scenes.h"

#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "cli/cli.h"

static int push(brm_path_list *l, const char *p)
{
    if (l->count == l->cap) {
        size_t nc = l->cap ? l->cap * 2 : 16;
        char **ni = realloc(l->items, nc * sizeof *ni);
        if (!ni) return -1;
        l->items = ni;
        l->cap = nc;
    }
    size_t n = strlen(p) + 1;
    l->items[l->count] = malloc(n);
    if (!l->items[l->count]) return -1;
    memcpy(l->items[l->count++], p, n);
    return 0;
}

static int cmp_str(const void *a, const void *b) { return strcmp(*(char *const *)a, *(char *const *)b); }

static int walk(brm_path_list *l, const char *dir)
{
    DIR *d = opendir(dir);
    if (!d) return 0;
    brm_path_list here = {0};
    struct dirent *e;
    while ((e = readdir(d)) != NULL) {
        if (e->d_name[0] == '.') continue;
        char p[4096];
        snprintf(p, sizeof p, "%s/%s", dir, e->d_name);
        push(&here, p);
    }
    closedir(d);
    /* Sorted, so a folder bakes in the same order everywhere. */
    qsort(here.items, here.count, sizeof *here.items, cmp_str);
    for (size_t i = 0; i < here.count; i++) {
        struct stat st;
        if (stat(here.items[i], &st) != 0) continue;
        size_t n = strlen(here.items[i]);
        if (S_ISDIR(st.st_mode)) walk(l, here.items[i]);
        else if (n > 5 && strcmp(here.items[i] + n - 5, ".json") == 0) push(l, here.items[i]);
    }
    brm_path_list_free(&here);
    return 0;
}

int brm_collect_scenes(brm_path_list *l, const char *path)
{
    struct stat st;
    if (stat(path, &st) != 0) {
        /* Let the loader report a missing file with its own message. */
        return push(l, path);
    }
    if (S_ISDIR(st.st_mode)) return walk(l, path);
    return push(l, path);
}

void brm_path_list_free(brm_path_list *l)
{
    for (size_t i = 0; i < l->count; i++) free(l->items[i]);
    free(l->items);
    l->items = NULL;
    l->count = l->cap = 0;
}
