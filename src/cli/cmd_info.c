/* brume info FILE.brv [--json]: describe a volume. */
#include <cJSON.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "brume/brv.h"
#include "cli/cli.h"

static const char info_help[] =
    "usage: brume info FILE.brv [--json]\n"
    "\n"
    "Describes a volume: grid kind, cells, bounds (world, probes: first and last probe) or\n"
    "camera and slice depths (frustum), brick size and count, channels with encoding, units,\n"
    "min and max, the compressed size and ratio against raw float32, and the metadata.\n"
    "Only the header and tables are read; 'brume verify' checks every brick.\n"
    "\n"
    "  --json   one JSON object: \"grid\", \"cells\", \"channels\" [{\"name\", \"encoding\", \"units\",\n"
    "           \"min\", \"max\", \"scale_exp_max\"}], \"bounds\" {\"min\", \"max\"} or \"camera\" and\n"
    "           \"slice_depths\", \"brick_size\", \"bricks\", \"file_bytes\", \"brick_bytes\",\n"
    "           \"ratio\", \"version\", \"metadata\"\n"
    "\n"
    "Exit status: 0 ok; 1 corrupt or not a volume; 2 a usage error; 3 the file cannot be read.\n";

static const char *kind_name(brv_grid_kind k)
{
    return k == BRV_GRID_WORLD ? "world" : k == BRV_GRID_FRUSTUM ? "frustum" : k == BRV_GRID_PROBES ? "probes" : "?";
}

static const char *enc_name(const brv_channel_info *c)
{
    switch (c->encoding) {
    case BRV_ENCODING_F32: return "f32";
    case BRV_ENCODING_F16: return "f16";
    case BRV_ENCODING_RGB9E5: return "rgb9e5";
    default: return "unknown";
    }
}

static cJSON *vec3(const double *v)
{
    return cJSON_CreateDoubleArray(v, 3);
}

static int print_json(const char *path, const brv_volume *v)
{
    const brv_grid_info *g = brv_grid(v);
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "file", path);
    char ver[32];
    snprintf(ver, sizeof ver, "%u.%u", g->version_major, g->version_minor);
    cJSON_AddStringToObject(o, "version", ver);
    cJSON_AddStringToObject(o, "grid", kind_name(g->kind));
    int cells[3] = {(int)g->cells[0], (int)g->cells[1], (int)g->cells[2]};
    int bricks[3] = {(int)g->bricks[0], (int)g->bricks[1], (int)g->bricks[2]};
    cJSON_AddItemToObject(o, "cells", cJSON_CreateIntArray(cells, 3));
    if (g->kind == BRV_GRID_FRUSTUM) {
        cJSON *cam = cJSON_AddObjectToObject(o, "camera");
        cJSON_AddItemToObject(cam, "position", vec3(g->camera.position));
        cJSON_AddItemToObject(cam, "look_at", vec3(g->camera.look_at));
        cJSON_AddItemToObject(cam, "up", vec3(g->camera.up));
        cJSON_AddNumberToObject(cam, "fov_y_deg", g->camera.fov_y_deg);
        cJSON_AddNumberToObject(cam, "aspect", g->camera.aspect);
        cJSON_AddNumberToObject(cam, "near", g->camera.near_m);
        cJSON_AddNumberToObject(cam, "far", g->camera.far_m);
        cJSON_AddItemToObject(o, "slice_depths", cJSON_CreateDoubleArray(g->slice_depths, (int)g->cells[2] + 1));
    } else {
        cJSON *b = cJSON_AddObjectToObject(o, "bounds");
        cJSON_AddItemToObject(b, "min", vec3(g->bounds_min));
        cJSON_AddItemToObject(b, "max", vec3(g->bounds_max));
    }
    cJSON_AddNumberToObject(o, "brick_size", g->brick_size);
    cJSON_AddItemToObject(o, "bricks", cJSON_CreateIntArray(bricks, 3));
    cJSON_AddNumberToObject(o, "brick_count", g->brick_count);
    cJSON *chs = cJSON_AddArrayToObject(o, "channels");
    for (uint32_t c = 0; c < g->channel_count; c++) {
        const brv_channel_info *ci = brv_channel(v, c);
        cJSON *e = cJSON_CreateObject();
        cJSON_AddStringToObject(e, "name", ci->name);
        cJSON_AddStringToObject(e, "encoding", enc_name(ci));
        cJSON_AddStringToObject(e, "units", ci->units);
        cJSON_AddNumberToObject(e, "min", ci->min);
        cJSON_AddNumberToObject(e, "max", ci->max);
        cJSON_AddNumberToObject(e, "scale_exp_max", ci->scale_exp_max);
        cJSON_AddItemToArray(chs, e);
    }
    double raw = 4.0 * (double)brv_all_size(v);
    cJSON_AddNumberToObject(o, "file_bytes", (double)g->file_size);
    cJSON_AddNumberToObject(o, "brick_bytes", (double)g->brick_bytes);
    cJSON_AddNumberToObject(o, "ratio", raw / (double)g->file_size);
    const char *meta = brv_metadata(v, NULL);
    cJSON *m = meta && *meta ? cJSON_ParseWithOpts(meta, NULL, 1) : NULL;
    if (m) cJSON_AddItemToObject(o, "metadata", m);
    else if (meta && *meta) cJSON_AddStringToObject(o, "metadata", meta);
    char *s = cJSON_Print(o);
    cJSON_Delete(o);
    if (!s) {
        brm_cli_error("out of memory");
        return BRM_EXIT_IO;
    }
    puts(s);
    cJSON_free(s);
    return BRM_EXIT_OK;
}

static void print_text(const char *path, const brv_volume *v)
{
    const brv_grid_info *g = brv_grid(v);
    printf("%s: brume volume %u.%u, %llu bytes\n", path, g->version_major, g->version_minor,
           (unsigned long long)g->file_size);
    printf("grid        %s, %u x %u x %u %s\n", kind_name(g->kind), g->cells[0], g->cells[1], g->cells[2],
           g->kind == BRV_GRID_PROBES ? "probes" : g->kind == BRV_GRID_FRUSTUM ? "froxels" : "cells");
    if (g->kind == BRV_GRID_FRUSTUM) {
        const brv_camera *c = &g->camera;
        printf("camera      position (%g, %g, %g) look_at (%g, %g, %g) up (%g, %g, %g)\n", c->position[0],
               c->position[1], c->position[2], c->look_at[0], c->look_at[1], c->look_at[2], c->up[0], c->up[1],
               c->up[2]);
        printf("            fov_y %g deg, aspect %g, near %g m, far %g m\n", c->fov_y_deg, c->aspect, c->near_m,
               c->far_m);
        printf("slices      %u, view depths %g .. %g m (first %g .. %g)\n", g->cells[2], g->slice_depths[0],
               g->slice_depths[g->cells[2]], g->slice_depths[0], g->slice_depths[1]);
    } else {
        printf("%-11s (%g, %g, %g) .. (%g, %g, %g) m\n", g->kind == BRV_GRID_PROBES ? "probes at" : "bounds",
               g->bounds_min[0], g->bounds_min[1], g->bounds_min[2], g->bounds_max[0], g->bounds_max[1],
               g->bounds_max[2]);
    }
    printf("bricks      %u^3 cells, %u x %u x %u = %u bricks\n", g->brick_size, g->bricks[0],
           g->bricks[1], g->bricks[2], g->brick_count);
    printf("channels    %u\n", g->channel_count);
    printf("  %-16s %-8s %-10s %14s %14s\n", "name", "encoding", "units", "min", "max");
    for (uint32_t c = 0; c < g->channel_count; c++) {
        const brv_channel_info *ci = brv_channel(v, c);
        printf("  %-16s %-8s %-10s %14.6g %14.6g", ci->name, enc_name(ci), ci->units[0] ? ci->units : "-",
               (double)ci->min, (double)ci->max);
        if (ci->scale_exp_max) printf("  (scaled by up to 2^%d)", ci->scale_exp_max);
        putchar('\n');
    }
    double raw = 4.0 * (double)brv_all_size(v);
    printf("compressed  %llu bytes of bricks, %llu bytes in all; %.2fx smaller than raw float32 (%.0f bytes)\n",
           (unsigned long long)g->brick_bytes, (unsigned long long)g->file_size, raw / (double)g->file_size, raw);
    const char *meta = brv_metadata(v, NULL);
    cJSON *m = meta && *meta ? cJSON_ParseWithOpts(meta, NULL, 1) : NULL;
    if (!meta || !*meta) {
        printf("metadata    none\n");
    } else if (!cJSON_IsObject(m)) {
        printf("metadata    (not a JSON object) %.60s\n", meta);
    } else {
        printf("metadata\n");
        for (cJSON *it = m->child; it; it = it->next) {
            if (cJSON_IsString(it)) printf("  %-16s %s\n", it->string, it->valuestring);
            else if (cJSON_IsNumber(it)) printf("  %-16s %g\n", it->string, it->valuedouble);
            else if (cJSON_IsBool(it)) printf("  %-16s %s\n", it->string, cJSON_IsTrue(it) ? "true" : "false");
            else if (cJSON_IsArray(it)) printf("  %-16s [%d items]\n", it->string, cJSON_GetArraySize(it));
            else if (cJSON_IsObject(it)) printf("  %-16s {%d keys}\n", it->string, cJSON_GetArraySize(it));
        }
    }
    cJSON_Delete(m);
}

int brm_cmd_info(int argc, char **argv)
{
    const char *path = NULL;
    int json = 0;
    for (int i = 1; i < argc; i++) {
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            fputs(info_help, stdout);
            return BRM_EXIT_OK;
        }
        if (brm_cli_flag(argv, i, "--json")) {
            json = 1;
            continue;
        }
        if (argv[i][0] == '-' && argv[i][1] != '\0') return brm_cli_usage("info", "unknown option '%s'", argv[i]);
        if (path) return brm_cli_usage("info", "one volume file at a time ('%s' and '%s' given)", path, argv[i]);
        path = argv[i];
    }
    if (!path) return brm_cli_usage("info", "which volume? give FILE.brv");
    brv_volume *v = NULL;
    brv_result r = brv_open_file(path, NULL, &v);
    if (r != BRV_OK) {
        if (r == BRV_E_IO) brm_cli_error("%s: cannot open or read the file", path);
        else brm_cli_error("%s: %s; 'brume verify %s' tells more, baking again repairs it", path, brv_result_text(r), path);
        return r == BRV_E_IO || r == BRV_E_NOMEM ? BRM_EXIT_IO : BRM_EXIT_INPUT;
    }
    int rc = BRM_EXIT_OK;
    if (json) rc = print_json(path, v);
    else print_text(path, v);
    brv_free(v);
    return rc;
}
