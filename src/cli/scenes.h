/* Shared by check and bake: expanding scene arguments (files, or folders searched for scenes). */
#ifndef BRM_CLI_SCENES_H
#define BRM_CLI_SCENES_H

#include <stddef.h>
#include <stdint.h>

typedef struct brm_path_list {
    char **items;
    size_t count, cap;
} brm_path_list;

/* Appends path, or every scene below it when it is a folder: each *.json file, searched
 * recursively in sorted order, skipping names that start with '.', and skipping JSON files
 * that parse but have no top-level "brume" key (reports, other tools' files; a file that does
 * not parse is kept, so the loader explains what is wrong with it). A file named directly is
 * always kept, even when it does not exist, so the loader reports it. A file already in the
 * list (the same file by device and inode) is not added twice.
 * Returns 0 on success; -1 (message printed, naming the folder) when a folder holds no scene;
 * -2 when out of memory. */
int brm_collect_scenes(brm_path_list *l, const char *path);
void brm_path_list_free(brm_path_list *l);

struct brm_scene;
/* Estimated lighting work of target t, for planning and for `check`: sample·light evaluations
 * (cells × samples × (lights + 1, + 1 with a sky)) for world and frustum targets, ray·light
 * evaluations (probes × rays × (lights + 1, + 1 with a sky)) for probes; the + 1 stands for
 * the per-cell cost that does not depend on lights. */
uint64_t brm_cli_target_work(const struct brm_scene *s, uint32_t t);

#endif
