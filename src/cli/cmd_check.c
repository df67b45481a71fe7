/* brume check SCENE.json... — load and validate only; print what a bake would cost. */
#include <stdio.h>
#include <string.h>

#include "bake/bake.h"
#include "bake/warnings.h"
#include "cli/cli.h"
#include "cli/scenes.h"
#include "scene/scene.h"
#include "voxel/grid.h"

static const char *help =
    "usage: brume check SCENE.json|FOLDER... [--reference] [-j N]\n"
    "\n"
    "Loads and validates each scene (and every mesh it references) without baking, and prints\n"
    "its triangles, bounds, lights and media, and per target the cell count, the estimated peak\n"
    "memory and work, and warnings. Folders are searched for *.json scenes.\n"
    "\n"
    "  --reference   estimate for the slow exact mode\n"
    "  -j N          estimate for N worker threads (default: all cores)\n"
    "\n"
    "Exit status: 0 all scenes valid, 1 a scene or mesh is invalid, 2 usage error, 3 unreadable.\n";

static const char *grid_name(brm_grid_kind k)
{
    return k == BRM_GRID_WORLD ? "world" : k == BRM_GRID_FRUSTUM ? "frustum" : k == BRM_GRID_PROBES ? "probes" : "?";
}

static void print_vec(const char *label, brm_vec3 a, brm_vec3 b)
{
    printf("%s[%.6g, %.6g, %.6g] .. [%.6g, %.6g, %.6g]\n", label, a.x, a.y, a.z, b.x, b.y, b.z);
}

static int print_scene(const brm_scene *s, const brm_bake_opts *o, const brm_diag *d)
{
    printf("scene \"%s\" (%s)\n", s->name, s->path);
    uint32_t counts[BRM_SHAPE_MAX_ENUM] = {0};
    brm_aabb gb = brm_aabb_empty();
    for (uint32_t i = 0; i < s->object_count; i++) {
        counts[s->objects[i].shape < BRM_SHAPE_MAX_ENUM ? s->objects[i].shape : 0]++;
        brm_aabb_union(&gb, s->objects[i].bounds);
    }
    printf("  geometry: %u objects (%u boxes, %u spheres, %u meshes), %u triangles", s->object_count,
           counts[BRM_SHAPE_BOX], counts[BRM_SHAPE_SPHERE], counts[BRM_SHAPE_MESH], s->tri_count);
    if (s->degenerate_dropped) printf(", %u degenerate dropped", s->degenerate_dropped);
    printf("\n");
    if (s->object_count) print_vec("  geometry bounds: ", gb.min, gb.max);
    print_vec(s->fog_bounds_given ? "  fog bounds: " : "  fog bounds (from geometry and targets): ",
              s->fog_bounds.min, s->fog_bounds.max);
    uint32_t lc[BRM_LIGHT_MAX_ENUM] = {0};
    for (uint32_t i = 0; i < s->light_count; i++) lc[s->lights[i].type < BRM_LIGHT_MAX_ENUM ? s->lights[i].type : 0]++;
    printf("  lights: %u (%u directional, %u point, %u spot)\n", s->light_count, lc[BRM_LIGHT_DIRECTIONAL],
           lc[BRM_LIGHT_POINT], lc[BRM_LIGHT_SPOT]);
    static const char *mnames[] = {"?", "uniform", "height", "box", "noise"};
    printf("  media: %u", s->medium_count);
    for (uint32_t i = 0; i < s->medium_count; i++)
        printf("%s%s", i ? ", " : " (", mnames[s->media[i].type < BRM_MEDIUM_MAX_ENUM ? s->media[i].type : 0]);
    printf("%s\n", s->medium_count ? ")" : "");
    printf("  sky: %s\n", s->sky.present ? "yes" : "none");
    brm_diag sw;
    brm_diag_init(&sw);
    brm_diag_merge_warnings(&sw, d);
    brm_scene_warnings(s, &sw);
    for (uint32_t i = 0; i < sw.warning_count; i++) printf("  warning: %s\n", sw.warnings[i]);
    int rc = BRM_EXIT_OK;
    for (uint32_t t = 0; t < s->target_count; t++) {
        const brm_target *tg = &s->targets[t];
        /* The grid is what a bake would build first: its errors are the bake's errors. */
        brm_diag gd;
        brm_diag_init(&gd);
        brm_grid g;
        brm_status gs = brm_grid_init(&g, tg, &gd);
        if (gs != BRM_OK) {
            fprintf(stderr, "brume: %s: %s\n", s->path, gd.message);
            if (rc == BRM_EXIT_OK) rc = brm_status_exit_code(gs);
            continue;
        }
        uint64_t mem = brm_bake_estimate_memory(s, t, o);
        uint64_t work = brm_cli_target_work(s, t);
        if (tg->grid == BRM_GRID_PROBES)
            printf("  target \"%s\": probes %ux%ux%u = %llu probes, spacing %.6g m, %u rays; estimated memory "
                   "%.1f MiB, work %.3g ray-light evaluations\n",
                   tg->name, g.n[0], g.n[1], g.n[2], (unsigned long long)brm_grid_cells(&g), tg->spacing_m, tg->rays,
                   (double)mem / 1048576.0, (double)work);
        else
            printf("  target \"%s\": %s %ux%ux%u = %llu cells, %u samples; estimated memory %.1f MiB, work %.3g "
                   "sample-light evaluations\n",
                   tg->name, grid_name(tg->grid), g.n[0], g.n[1], g.n[2], (unsigned long long)brm_grid_cells(&g),
                   tg->samples, (double)mem / 1048576.0, (double)work);
        brm_grid_free(&g);
        brm_diag tw;
        brm_diag_init(&tw);
        brm_target_warnings(s, t, o, &tw);
        for (uint32_t i = 0; i < tw.warning_count; i++) printf("    warning: %s\n", tw.warnings[i]);
    }
    return rc;
}

int brm_cmd_check(int argc, char **argv)
{
    brm_path_list scenes = {0};
    brm_bake_opts o;
    memset(&o, 0, sizeof o);
    for (int i = 1; i < argc; i++) {
        const char *v;
        int r;
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            fputs(help, stdout);
            brm_path_list_free(&scenes);
            return BRM_EXIT_OK;
        } else if (brm_cli_flag(argv, i, "--reference")) {
            o.reference = true;
        } else if ((r = brm_cli_opt("check", argc, argv, &i, "-j", &v)) != 0) {
            uint32_t n;
            if (r < 0 || !brm_cli_parse_u32(v, &n) || n == 0 || n > 1024) {
                brm_path_list_free(&scenes);
                return r < 0 ? BRM_EXIT_USAGE : brm_cli_usage("check", "-j wants a thread count 1..1024, not '%s'", v);
            }
            o.threads = (int)n;
        } else if (argv[i][0] == '-' && argv[i][1] != '\0') {
            brm_path_list_free(&scenes);
            return brm_cli_usage("check", "unknown option '%s'", argv[i]);
        } else {
            int c = brm_collect_scenes(&scenes, argv[i]);
            if (c < 0) {
                if (c == -2) brm_cli_error("out of memory");
                brm_path_list_free(&scenes);
                return c == -2 ? BRM_EXIT_IO : BRM_EXIT_INPUT;
            }
        }
    }
    if (scenes.count == 0) {
        brm_path_list_free(&scenes);
        return brm_cli_usage("check", "no scene given");
    }
    int rc = BRM_EXIT_OK;
    for (size_t i = 0; i < scenes.count; i++) {
        brm_diag d;
        brm_diag_init(&d);
        brm_scene *s = NULL;
        brm_status st = brm_scene_load(scenes.items[i], &s, &d);
        if (st != BRM_OK) {
            fprintf(stderr, "brume: %s\n", d.message);
            if (rc == BRM_EXIT_OK) rc = brm_status_exit_code(st);
            continue;
        }
        int prc = print_scene(s, &o, &d);
        if (rc == BRM_EXIT_OK) rc = prc;
        brm_scene_free(s);
    }
    brm_path_list_free(&scenes);
    return rc;
}
