/* brume preview: a picture of the baked fog over the scene's geometry (view/preview.h). */
#include <cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "bake/bake.h"
#include "base/atomic_file.h"
#include "base/diag.h"
#include "base/threads.h"
#include "brume/brv.h"
#include "cli/cli.h"
#include "scene/scene.h"
#include "view/preview.h"

static const char *CMD = "preview";

static void help(FILE *f)
{
    fprintf(f,
            "usage: brume preview SCENE.json --target NAME -o OUT.ppm [options]\n"
            "\n"
            "Renders what a target's camera sees: the scene's geometry, lit by its lights (with their\n"
            "shadows and the light's loss through the fog) and the sky, with the baked fog laid over\n"
            "it. Frustum targets use their own camera; world and probe targets need --from and\n"
            "--look-at. A probe target draws a small sphere at every probe, shaded by the probe's\n"
            "irradiance; invalid probes are black with a red cross. Unless --no-fog-beside, the same\n"
            "picture without the fog between the surfaces and the camera goes beside OUT, named\n"
            "OUT-nofog.ppm (probe targets have no fog picture and write only OUT).\n"
            "\n"
            "  --target NAME          the target to show (required)\n"
            "  -o, --output OUT.ppm   the picture (8-bit binary PPM)\n"
            "  --volume FILE.brv      the baked volume (default: out/<scene name>/<target>.brv, where\n"
            "                         brume bake puts it)\n"
            "  --from X,Y,Z           world and probe targets: the camera position (metres)\n"
            "  --look-at X,Y,Z        world and probe targets: the point it looks at (y is up)\n"
            "  --fov DEG              world and probe targets: vertical field of view (default 60)\n"
            "  --width W              pixels across (default 1280); the height follows the frustum\n"
            "                         camera's aspect, or 16:9\n"
            "  --exposure EV|auto     show k*radiance with k = 2^EV; auto (default) puts the 99th\n"
            "                         percentile of the fogged picture's brightest channel at 0.8 of\n"
            "                         white. Both pictures use the same exposure; the EV is printed\n"
            "  --no-fog-beside        do not write the fog-free picture\n"
            "  -j N                   threads (default: all cores); the picture is the same for any N\n"
            "  -h, --help             this text\n"
            "\n"
            "Tone curve: x/(1+x) per channel of the exposed radiance, then sRGB encoding.\n"
            "\n"
            "Exit status: 0 written, 1 invalid scene or volume (or a volume baked for another grid),\n"
            "2 usage error (flags, unknown target), 3 cannot read or write a file (a missing volume).\n");
}


/* "X,Y,Z" with three finite numbers. */
static bool parse_vec(const char *s, brm_vec3 *out)
{
    char buf[3][64];
    const char *p = s;
    for (int k = 0; k < 3; k++) {
        const char *e = k < 2 ? strchr(p, ',') : p + strlen(p);
        if (e == NULL || (size_t)(e - p) >= sizeof buf[k]) return false;
        memcpy(buf[k], p, (size_t)(e - p));
        buf[k][e - p] = '\0';
        p = e + 1;
    }
    if (strchr(buf[2], ',')) return false;
    double v[3];
    for (int k = 0; k < 3; k++)
        if (!brm_cli_parse_double(buf[k], &v[k])) return false;
    *out = brm_v3(v[0], v[1], v[2]);
    return true;
}

/* Whether the volume's recorded input hash matches the scene as it is now (either mode). */
static bool volume_is_current(const brm_scene *s, uint32_t t, const brv_volume *v)
{
    size_t len = 0;
    const char *m = brv_metadata(v, &len);
    cJSON *j = m ? cJSON_ParseWithLength(m, len) : NULL;
    const cJSON *h = cJSON_GetObjectItemCaseSensitive(j, "input_hash");
    bool ok = false;
    if (cJSON_IsString(h)) {
        for (int ref = 0; ref < 2 && !ok; ref++) {
            brm_bake_opts o;
            memset(&o, 0, sizeof o);
            o.reference = ref;
            char hx[65];
            brm_bake_input_hash(s, t, &o, hx);
            ok = strcmp(hx, h->valuestring) == 0;
        }
    }
    cJSON_Delete(j);
    return ok;
}

static int fail(brm_status st, const brm_diag *d)
{
    if (st == BRM_E_USAGE) return brm_cli_usage(CMD, "%s", d->message);
    brm_cli_error("%s", d->message);
    return brm_status_exit_code(st);
}

int brm_cmd_preview(int argc, char **argv)
{
    const char *scene_path = NULL, *target = NULL, *out = NULL, *volume = NULL, *from_s = NULL, *look_s = NULL;
    const char *fov_s = NULL, *width_s = NULL, *exposure_s = NULL, *jobs_s = NULL;
    bool no_beside = false;
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        int r;
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            help(stdout);
            return BRM_EXIT_OK;
        }
        if (brm_cli_flag(argv, i, "--no-fog-beside")) { no_beside = true; continue; }
#define OPT(name, var) BRM_CLI_TAKE(CMD, name, var)
        OPT("--target", target)
        OPT("--output", out)
        OPT("-o", out)
        OPT("--volume", volume)
        OPT("--from", from_s)
        OPT("--look-at", look_s)
        OPT("--fov", fov_s)
        OPT("--width", width_s)
        OPT("--exposure", exposure_s)
        OPT("-j", jobs_s)
#undef OPT
        if (a[0] == '-' && a[1] != '\0') return brm_cli_usage(CMD, "unknown option '%s'", a);
        if (scene_path != NULL) return brm_cli_usage(CMD, "one scene at a time ('%s' and '%s')", scene_path, a);
        scene_path = a;
    }
    if (scene_path == NULL) return brm_cli_usage(CMD, "no scene given; give SCENE.json");
    if (target == NULL) return brm_cli_usage(CMD, "missing --target NAME");
    if (out == NULL) return brm_cli_usage(CMD, "missing -o OUT.ppm");
    if (!brm_cli_ends_with(out, ".ppm")) return brm_cli_usage(CMD, "-o '%s': the name must end in .ppm", out);

    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    if ((from_s == NULL) != (look_s == NULL))
        return brm_cli_usage(CMD, "give --from X,Y,Z and --look-at X,Y,Z together");
    if (from_s != NULL) {
        if (!parse_vec(from_s, &o.from))
            return brm_cli_usage(CMD, "--from '%s' is not a point; give X,Y,Z in metres, e.g. 0,1.7,8", from_s);
        if (!parse_vec(look_s, &o.look_at))
            return brm_cli_usage(CMD, "--look-at '%s' is not a point; give X,Y,Z in metres, e.g. 0,1.5,0", look_s);
        o.camera_set = true;
    }
    if (fov_s != NULL) {
        if (from_s == NULL) return brm_cli_usage(CMD, "--fov goes with --from and --look-at");
        if (!brm_cli_parse_double(fov_s, &o.fov_y_deg) || !(o.fov_y_deg > 0.0 && o.fov_y_deg < 180.0))
            return brm_cli_usage(CMD, "--fov '%s' is not an angle; give degrees between 0 and 180 (exclusive)", fov_s);
    }
    if (width_s != NULL && (!brm_cli_parse_u32(width_s, &o.width) || o.width < 1 || o.width > 16384))
        return brm_cli_usage(CMD, "--width '%s' is not a picture width; give pixels from 1 to 16384", width_s);
    if (exposure_s != NULL && strcmp(exposure_s, "auto") != 0) {
        if (!brm_cli_parse_double(exposure_s, &o.exposure_ev) || fabs(o.exposure_ev) > 64.0)
            return brm_cli_usage(CMD, "--exposure '%s' is not an EV; give a number from -64 to 64 or auto", exposure_s);
        o.exposure_set = true;
    }
    if (jobs_s != NULL) {
        uint32_t n;
        if (!brm_cli_parse_u32(jobs_s, &n) || n < 1 || n > 1024)
            return brm_cli_usage(CMD, "-j '%s' is not a thread count; give 1 to 1024", jobs_s);
        o.threads = (int)n;
    }

    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    brm_status st = brm_scene_load(scene_path, &s, &d);
    for (uint32_t w = 0; w < d.warning_count; w++) fprintf(stderr, "brume: warning: %s\n", d.warnings[w]);
    if (st != BRM_OK) return fail(st, &d);
    int rc = BRM_EXIT_OK;
    brv_volume *vol = NULL;
    brm_preview p;
    memset(&p, 0, sizeof p);
    uint8_t *main_bytes = NULL, *beside_bytes = NULL;
    size_t main_len = 0, beside_len = 0;

    int ti = brm_scene_find_target(s, target);
    if (ti < 0) {
        char list[1024] = "";
        size_t used = 0;
        for (uint32_t k = 0; k < s->target_count && used < sizeof list; k++) {
            int n = snprintf(list + used, sizeof list - used, "%s%s", k ? ", " : "", s->targets[k].name);
            if (n > 0) used += (size_t)n;
        }
        rc = brm_cli_usage(CMD, "%s: no target \"%s\"; the targets are: %s", scene_path, target, list);
        goto done;
    }
    const brm_target *tg = &s->targets[ti];
    if (tg->grid == BRM_GRID_FRUSTUM && o.camera_set) {
        rc = brm_cli_usage(CMD, "target \"%s\" is a frustum target and uses its own camera; drop --from, --look-at and --fov",
                           tg->name);
        goto done;
    }
    if (tg->grid != BRM_GRID_FRUSTUM && !o.camera_set) {
        rc = brm_cli_usage(CMD, "target \"%s\" is a %s target: give a camera with --from X,Y,Z --look-at X,Y,Z [--fov DEG]",
                           tg->name, tg->grid == BRM_GRID_WORLD ? "world" : "probe");
        goto done;
    }

    char vol_path[BRM_PATH_MAX];
    if (volume != NULL) snprintf(vol_path, sizeof vol_path, "%s", volume);
    else if (!brm_preview_default_volume(s, (uint32_t)ti, vol_path, sizeof vol_path)) {
        rc = brm_cli_usage(CMD, "the default volume path is too long; give --volume FILE.brv");
        goto done;
    }
    struct stat sb;
    if (stat(vol_path, &sb) != 0) {
        brm_cli_error("%s: no such volume for target \"%s\"; bake it first: brume bake %s%s%s", vol_path, tg->name,
                      scene_path, volume ? " -o DIR" : "", volume ? " (or give the right --volume)" : "");
        rc = BRM_EXIT_IO;
        goto done;
    }
    brv_result vr = brv_open_file(vol_path, NULL, &vol);
    if (vr != BRV_OK) {
        brm_cli_error("%s: %s%s", vol_path, brv_result_text(vr),
                      vr == BRV_E_IO || vr == BRV_E_NOMEM ? "" : "; bake it again: brume bake SCENE --force");
        rc = vr == BRV_E_IO || vr == BRV_E_NOMEM ? BRM_EXIT_IO : BRM_EXIT_INPUT;
        goto done;
    }
    if ((st = brm_preview_check_volume(s, (uint32_t)ti, vol, vol_path, &d)) != BRM_OK) {
        rc = fail(st, &d);
        goto done;
    }
    if (!volume_is_current(s, (uint32_t)ti, vol))
        fprintf(stderr,
                "brume: warning: %s was baked from other inputs than %s has now (the scene, its meshes or the "
                "tool changed); the picture shows the old fog; run brume bake %s to bring it up to date\n",
                vol_path, scene_path, scene_path);

    brm_install_interrupt_handlers();
    if ((st = brm_preview_render(s, (uint32_t)ti, vol, vol_path, &o, &p, &d)) != BRM_OK) {
        rc = fail(st, &d);
        goto done;
    }
    bool beside = !no_beside && tg->grid != BRM_GRID_PROBES;
    char beside_path[BRM_PATH_MAX];
    if (beside && !brm_preview_beside_path(out, beside_path, sizeof beside_path)) {
        rc = brm_cli_usage(CMD, "-o '%s': the name is too long for the fog-free picture beside it", out);
        goto done;
    }
    /* Both pictures are encoded before either file is touched. */
    if ((st = brm_preview_encode(&p, true, &main_bytes, &main_len, &d)) != BRM_OK ||
        (beside && (st = brm_preview_encode(&p, false, &beside_bytes, &beside_len, &d)) != BRM_OK)) {
        rc = fail(st, &d);
        goto done;
    }
    if ((st = brm_write_file_atomic(out, main_bytes, main_len, &d)) != BRM_OK ||
        (beside && (st = brm_write_file_atomic(beside_path, beside_bytes, beside_len, &d)) != BRM_OK)) {
        rc = fail(st, &d);
        goto done;
    }
    printf("wrote %s: %ux%u PPM, target \"%s\" (%s), exposure EV %+.3f%s, %.2f s\n", out, p.w, p.h, tg->name,
           tg->grid == BRM_GRID_WORLD ? "world" : tg->grid == BRM_GRID_FRUSTUM ? "frustum" : "probes", p.exposure_ev,
           o.exposure_set ? "" : " (automatic)", p.seconds);
    if (beside) printf("wrote %s: the same without the fog\n", beside_path);
    if (tg->grid == BRM_GRID_PROBES && p.probes_invalid)
        printf("%u invalid probe%s drawn black with a cross\n", p.probes_invalid, p.probes_invalid == 1 ? "" : "s");

done:
    free(main_bytes);
    free(beside_bytes);
    brm_preview_free(&p);
    brv_free(vol);
    brm_scene_free(s);
    return rc;
}
