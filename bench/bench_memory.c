/* Memory estimate against measured peak: bakes targets of several sizes, each in a child
 * process of its own, and compares brm_bake_estimate_memory with the child's peak resident set
 * (getrusage ru_maxrss, taken in the child after its bake). The estimate is what --max-memory
 * is checked against; it should be within 25 % of the peak, and the 512x128x512 world target
 * should bake with a peak under 1 GiB.
 *
 *   build/bench/bench_memory [--quick] [-j N]    (--quick leaves out the two largest targets)
 *
 * Each child loads the scene from memory and bakes into a temporary folder that is removed
 * afterwards; the parent does nothing but fork and read the figures, so the children start
 * small. The scene is a made-up yard: a ground slab, a shed, a pillar and a sphere, a low sun
 * and a lamp, uniform and height fog. */
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>

#include "bake/bake.h"
#include "base/threads.h"
#include "scene/scene.h"

typedef struct size_case {
    const char *label;
    const char *target; /* the target's JSON object */
} size_case;

static const char *scene_head =
    "{\"brume\": 1, \"name\": \"memory-yard\",\n"
    " \"fog_bounds\": {\"min\": [0, 0, 0], \"max\": [64, 16, 64]},\n"
    " \"geometry\": [\n"
    "  {\"shape\": \"box\", \"min\": [-1, -0.5, -1], \"max\": [65, 0, 65]},\n"
    "  {\"shape\": \"box\", \"min\": [10, 0, 10], \"max\": [22, 5, 18]},\n"
    "  {\"shape\": \"box\", \"min\": [40, 0, 30], \"max\": [41, 12, 31]},\n"
    "  {\"shape\": \"sphere\", \"center\": [30, 2, 45], \"radius\": 2}],\n"
    " \"lights\": [\n"
    "  {\"type\": \"directional\", \"direction\": [0.6, -0.5, 0.3], \"illuminance_lux\": 20000},\n"
    "  {\"type\": \"point\", \"position\": [32, 6, 32], \"intensity_cd\": 800, \"range_m\": 24}],\n"
    " \"media\": [{\"type\": \"uniform\", \"visibility_m\": 200},\n"
    "            {\"type\": \"height\", \"extinction_per_m\": 0.05, \"base_y\": 0, \"scale_height_m\": 3}],\n"
    " \"targets\": [";

static const size_case cases[] = {
    {"world 64x16x64", "{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [64,16,64], \"cells\": [64,16,64], \"samples\": 1}"},
    {"world 128x32x128", "{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [64,16,64], \"cells\": [128,32,128], \"samples\": 1}"},
    {"world 256x64x256", "{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [64,16,64], \"cells\": [256,64,256], \"samples\": 1}"},
    {"frustum 160x90x128", "{\"name\": \"t\", \"grid\": \"frustum\", \"camera\": {\"position\": [2,3,2], \"look_at\": [40,2,40], "
                           "\"up\": [0,1,0], \"fov_y_deg\": 60, \"aspect\": 1.7778, \"near\": 0.3, \"far\": 80}, "
                           "\"cells\": [160,90,128], \"samples\": 1}"},
    {"probes 2 m (33x9x33)", "{\"name\": \"t\", \"grid\": \"probes\", \"min\": [0,0,0], \"max\": [64,16,64], \"spacing_m\": 2, \"rays\": 64}"},
    {"world 256x128x256", "{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [64,16,64], \"cells\": [256,128,256], \"samples\": 1}"},
    {"world 512x128x512", "{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [64,16,64], \"cells\": [512,128,512], \"samples\": 1}"},
};

typedef struct child_result {
    int ok;
    uint64_t estimate;
    uint64_t peak;      /* bytes */
    uint64_t baseline;  /* bytes resident after loading the scene, before baking */
    double seconds;
    uint64_t cells;
    char message[256];
} child_result;

static void child(const char *json, int threads, const char *dir, child_result *r)
{
    memset(r, 0, sizeof *r);
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    if (brm_scene_load_memory(json, strlen(json), "memory-yard.json", &s, &d) != BRM_OK) {
        snprintf(r->message, sizeof r->message, "%.200s", d.message);
        return;
    }
    brm_bake_opts o;
    memset(&o, 0, sizeof o);
    o.threads = threads;
    o.max_memory = (uint64_t)64 << 30; /* measure, do not refuse */
    r->estimate = brm_bake_estimate_memory(s, 0, &o);
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    r->baseline = (uint64_t)ru.ru_maxrss * 1024u;
    char out[512];
    snprintf(out, sizeof out, "%s/t.brv", dir);
    brm_bake_stats st;
    brm_status rc = brm_bake_target(s, 0, &o, out, &st, &d);
    getrusage(RUSAGE_SELF, &ru);
    r->peak = (uint64_t)ru.ru_maxrss * 1024u;
    r->seconds = st.seconds;
    r->cells = st.cells;
    r->ok = rc == BRM_OK;
    if (!r->ok) snprintf(r->message, sizeof r->message, "%.200s", d.message);
    unlink(out);
    brm_scene_free(s);
}

int main(int argc, char **argv)
{
    int threads = brm_cpu_count();
    size_t count = sizeof cases / sizeof cases[0];
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--quick") == 0) count -= 2;
        else if (strcmp(argv[i], "-j") == 0 && i + 1 < argc) threads = atoi(argv[++i]);
        else {
            fprintf(stderr, "usage: bench_memory [--quick] [-j N]\n");
            return 2;
        }
    }
    if (threads < 1) threads = 1;
    char dir[] = "/tmp/brume-bench-memory-XXXXXX";
    if (!mkdtemp(dir)) {
        perror("bench_memory: mkdtemp");
        return 1;
    }
    printf("bench_memory: estimated peak memory vs measured peak RSS, %d thread(s), one child per target\n", threads);
    printf("%-22s %11s %10s %10s %10s %8s %8s\n", "target", "cells", "est MiB", "peak MiB", "base MiB", "est/peak",
           "seconds");
    int bad = 0;
    for (size_t c = 0; c < count; c++) {
        size_t n = strlen(scene_head) + strlen(cases[c].target) + 8;
        char *json = malloc(n);
        if (!json) return 1;
        snprintf(json, n, "%s%s]}\n", scene_head, cases[c].target);
        int fd[2];
        if (pipe(fd) != 0) return 1;
        fflush(stdout);
        pid_t pid = fork();
        if (pid == 0) {
            close(fd[0]);
            child_result r;
            child(json, threads, dir, &r);
            ssize_t w = write(fd[1], &r, sizeof r);
            _exit(w == (ssize_t)sizeof r ? 0 : 1);
        }
        close(fd[1]);
        child_result r;
        memset(&r, 0, sizeof r);
        ssize_t got = 0;
        while (got < (ssize_t)sizeof r) {
            ssize_t k = read(fd[0], (char *)&r + got, sizeof r - (size_t)got);
            if (k < 0 && errno == EINTR) continue;
            if (k <= 0) break;
            got += k;
        }
        close(fd[0]);
        int status = 0;
        waitpid(pid, &status, 0);
        free(json);
        if (got != (ssize_t)sizeof r || !r.ok) {
            printf("%-22s failed: %s\n", cases[c].label, got == (ssize_t)sizeof r ? r.message : "child died");
            bad++;
            continue;
        }
        double ratio = (double)r.estimate / (double)r.peak;
        bool within = ratio >= 0.75 && ratio <= 1.25;
        printf("%-22s %11llu %10.1f %10.1f %10.1f %8.2f %8.2f%s\n", cases[c].label, (unsigned long long)r.cells,
               (double)r.estimate / 1048576.0, (double)r.peak / 1048576.0, (double)r.baseline / 1048576.0, ratio,
               r.seconds, within ? "" : "  (outside 25 %)");
        if (!within) bad++;
        fflush(stdout);
    }
    rmdir(dir);
    printf("%d of %zu targets outside 25 %% or failed\n", bad, count);
    return bad ? 1 : 0;
}
