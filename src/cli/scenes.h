/* Shared by check and bake: expanding scene arguments (files, or folders searched for *.json). */
#ifndef BRM_CLI_SCENES_H
#define BRM_CLI_SCENES_H

#include <stddef.h>

typedef struct brm_path_list {
    char **items;
    size_t count, cap;
} brm_path_list;

/* Appends path, or every *.json below it (sorted, recursively) when it is a folder.
 * Returns 0 on success, -1 when path does not exist (message printed). */
int brm_collect_scenes(brm_path_list *l, const char *path);
void brm_path_list_free(brm_path_list *l);

#endif
