/* Outputs that are never half-written: write to a temporary in the same folder, sync, rename.
 * A failure or an interruption before brm_atomic_commit leaves the previous file untouched. */
#ifndef BRM_ATOMIC_FILE_H
#define BRM_ATOMIC_FILE_H

#include <stdio.h>

#include "base/diag.h"
#include "scene/scene.h"

typedef struct brm_atomic_file {
    FILE *f;                        /* write here; seekable */
    char tmp_path[BRM_PATH_MAX];
    char final_path[BRM_PATH_MAX];
} brm_atomic_file;

/* Creates the temporary "<dir>/.<name>.tmp.XXXXXX" next to path (the folder must exist). */
brm_status brm_atomic_open(brm_atomic_file *af, const char *path, brm_diag *d);
/* Flushes, syncs, closes, renames over path and syncs the folder. On failure the temporary is
 * removed and the previous file stays. */
brm_status brm_atomic_commit(brm_atomic_file *af, brm_diag *d);
/* Closes and removes the temporary; safe to call after a failed commit or twice. */
void brm_atomic_abort(brm_atomic_file *af);

/* Whole buffer to path, atomically. */
brm_status brm_write_file_atomic(const char *path, const void *data, size_t len, brm_diag *d);

/* Creates a folder and its parents (like mkdir -p). */
brm_status brm_mkdirs(const char *path, brm_diag *d);

/* Reads a whole file into a NUL-terminated malloc'd buffer. */
brm_status brm_read_file(const char *path, char **out, size_t *len, brm_diag *d);

/* Temporaries not yet committed or aborted, for a signal handler's cleanup: removes them with
 * async-signal-safe calls only. */
void brm_atomic_cleanup_all(void);

#endif
