/* brume check SCENE.json... — load and validate only; print what a bake would cost. */
#include <stdio.h>
#include <string.h>

#include "bake/bake.h"
#include "cli/cli.h"
#include "cli/scenes.h"
#include "scene/scene.h"

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

static void print_scene(const brm_scene *s, const brm_bake_opts *o, const brm_diag *d)
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
    for (uint32_t t = 0; t < s->target_count; t++) {
        const brm_target *tg = &s->targets[t];
        uint64_t mem = brm_bake_estimate_memory(s, t, o);
        if (tg->grid == BRM_GRID_PROBES) {
            printf("  target \"%s\": probes, spacing %.6g m, %u rays; estimated memory %.1f MiB\n", tg->name,
                   tg->spacing_m, tg->rays, (double)mem / 1048576.0);
            continue;
        }
        uint64_t cells = (uint64_t)tg->cells[0] * tg->cells[1] * tg->cells[2];
        printf("  target \"%s\": %s %ux%ux%u = %llu cells, %u samples; estimated memory %.1f MiB, work %.3g "
               "cell-light-samples\n",
               tg->name, grid_name(tg->grid), tg->cells[0], tg->cells[1], tg->cells[2], (unsigned long long)cells,
               tg->samples, (double)mem / 1048576.0, (double)brm_bake_estimate_work(s, t));
    }
    for (uint32_t i = 0; i < d->warning_count; i++) printf("  warning: %s\n", d->warnings[i]);
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
            brm_collect_scenes(&scenes, argv[i]);
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
        print_scene(s, &o, &d);
        brm_scene_free(s);
    }
    brm_path_list_free(&scenes);
    return rc;
}
