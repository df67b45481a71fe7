#include "base/atomic_file.h"

#include <errno.h>
#include <fcntl.h>
#include <pthread.h>
#include <signal.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* Registry of open temporaries so an interrupted bake can remove them from a signal handler.
 * Fixed slots: threads claim and release them under a mutex; the path is written before the
 * slot's flag is set, so the handler (which takes no lock) only ever reads complete paths. */
#define MAX_LIVE 64
static char live_paths[MAX_LIVE][BRM_PATH_MAX];
static volatile sig_atomic_t live_used[MAX_LIVE];
static pthread_mutex_t live_lock = PTHREAD_MUTEX_INITIALIZER;

static void live_add(const char *p)
{
    pthread_mutex_lock(&live_lock);
    for (int i = 0; i < MAX_LIVE; i++) {
        if (!live_used[i]) {
            snprintf(live_paths[i], BRM_PATH_MAX, "%s", p);
            atomic_signal_fence(memory_order_seq_cst);
            live_used[i] = 1;
            break;
        }
    }
    pthread_mutex_unlock(&live_lock);
}

static void live_remove(const char *p)
{
    pthread_mutex_lock(&live_lock);
    for (int i = 0; i < MAX_LIVE; i++)
        if (live_used[i] && strcmp(live_paths[i], p) == 0) live_used[i] = 0;
    pthread_mutex_unlock(&live_lock);
}

void brm_atomic_cleanup_all(void)
{
    for (int i = 0; i < MAX_LIVE; i++)
        if (live_used[i]) {
            unlink(live_paths[i]);
            live_used[i] = 0;
        }
}

brm_status brm_atomic_open(brm_atomic_file *af, const char *path, brm_diag *d)
{
    memset(af, 0, sizeof *af);
    size_t n = strlen(path);
    if (n + 24 >= BRM_PATH_MAX) return brm_diag_error(d, BRM_E_IO, "%s: path too long", path);
    memcpy(af->final_path, path, n + 1);
    const char *slash = strrchr(path, '/');
    size_t dir_len = slash ? (size_t)(slash - path) + 1 : 0;
    snprintf(af->tmp_path, sizeof af->tmp_path, "%.*s.%s.tmp.XXXXXX", (int)dir_len, path,
             slash ? slash + 1 : path);
    int fd = mkstemp(af->tmp_path);
    if (fd < 0)
        return brm_diag_error(d, BRM_E_IO, "%s: cannot create a temporary file beside it: %s", path,
                              strerror(errno));
    mode_t um = umask(0);
    umask(um);
    if (fchmod(fd, 0666 & ~um) != 0) { /* best effort: keep 0600 */ }
    af->f = fdopen(fd, "w+b");
    if (af->f == NULL) {
        close(fd);
        unlink(af->tmp_path);
        return brm_diag_error(d, BRM_E_IO, "%s: %s", path, strerror(errno));
    }
    live_add(af->tmp_path);
    return BRM_OK;
}

brm_status brm_atomic_commit(brm_atomic_file *af, brm_diag *d)
{
    if (af->f == NULL) return brm_diag_error(d, BRM_E_INTERNAL, "%s: commit without open file", af->final_path);
    int err = 0;
    if (fflush(af->f) != 0 || ferror(af->f)) err = errno ? errno : EIO;
    if (!err && fsync(fileno(af->f)) != 0) err = errno;
    if (fclose(af->f) != 0 && !err) err = errno ? errno : EIO;
    af->f = NULL;
    if (!err && rename(af->tmp_path, af->final_path) != 0) err = errno;
    if (err) {
        unlink(af->tmp_path);
        live_remove(af->tmp_path);
        return brm_diag_error(d, BRM_E_IO, "%s: cannot write: %s", af->final_path, strerror(err));
    }
    live_remove(af->tmp_path);
    /* Sync the folder so the rename itself is durable. */
    char dir[BRM_PATH_MAX];
    const char *slash = strrchr(af->final_path, '/');
    if (slash) snprintf(dir, sizeof dir, "%.*s", (int)(slash - af->final_path + 1), af->final_path);
    else snprintf(dir, sizeof dir, ".");
    int dfd = open(dir, O_RDONLY);
    if (dfd >= 0) {
        fsync(dfd);
        close(dfd);
    }
    return BRM_OK;
}

void brm_atomic_abort(brm_atomic_file *af)
{
    if (af->f) {
        fclose(af->f);
        af->f = NULL;
    }
    if (af->tmp_path[0]) {
        unlink(af->tmp_path);
        live_remove(af->tmp_path);
        af->tmp_path[0] = '\0';
    }
}

brm_status brm_write_file_atomic(const char *path, const void *data, size_t len, brm_diag *d)
{
    brm_atomic_file af;
    brm_status s = brm_atomic_open(&af, path, d);
    if (s != BRM_OK) return s;
    if (len && fwrite(data, 1, len, af.f) != len) {
        int e = errno;
        brm_atomic_abort(&af);
        return brm_diag_error(d, BRM_E_IO, "%s: cannot write: %s", path, strerror(e));
    }
    return brm_atomic_commit(&af, d);
}

brm_status brm_mkdirs(const char *path, brm_diag *d)
{
    char buf[BRM_PATH_MAX];
    size_t n = strlen(path);
    if (n == 0) return BRM_OK;
    if (n >= sizeof buf) return brm_diag_error(d, BRM_E_IO, "%s: path too long", path);
    memcpy(buf, path, n + 1);
    for (size_t i = 1; i <= n; i++) {
        if (buf[i] == '/' || buf[i] == '\0') {
            char c = buf[i];
            buf[i] = '\0';
            if (mkdir(buf, 0777) != 0 && errno != EEXIST)
                return brm_diag_error(d, BRM_E_IO, "%s: cannot create folder: %s", buf, strerror(errno));
            buf[i] = c;
        }
    }
    struct stat st;
    if (stat(path, &st) != 0 || !S_ISDIR(st.st_mode))
        return brm_diag_error(d, BRM_E_IO, "%s: not a folder", path);
    return BRM_OK;
}

brm_status brm_read_file(const char *path, char **out, size_t *len, brm_diag *d)
{
    FILE *f = fopen(path, "rb");
    if (f == NULL) return brm_diag_error(d, BRM_E_IO, "%s: cannot open: %s", path, strerror(errno));
    size_t cap = 1 << 16, n = 0;
    char *buf = malloc(cap);
    if (buf == NULL) {
        fclose(f);
        return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", path);
    }
    for (;;) {
        if (n + 1 >= cap) {
            if (cap > ((size_t)1 << 40)) break;
            char *nb = realloc(buf, cap * 2);
            if (nb == NULL) {
                free(buf);
                fclose(f);
                return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", path);
            }
            buf = nb;
            cap *= 2;
        }
        size_t r = fread(buf + n, 1, cap - 1 - n, f);
        n += r;
        if (r == 0) break;
    }
    int bad = ferror(f);
    fclose(f);
    if (bad) {
        free(buf);
        return brm_diag_error(d, BRM_E_IO, "%s: read error", path);
    }
    buf[n] = '\0';
    *out = buf;
    if (len) *len = n;
    return BRM_OK;
}
