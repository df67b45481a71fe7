/* brume slice: one slice of a volume (or a contact sheet of every slice) as PPM or PFM. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/atomic_file.h"
#include "base/diag.h"
#include "cli/cli.h"
#include "view/render.h"
#include "view/source.h"

static const char *CMD = "slice";

static void help(FILE *f)
{
    fprintf(f,
            "usage: brume slice FILE.brv (--channel NAME[,NAME,NAME] | --irradiance AXIS)\n"
            "                   --axis x|y|z (--index K | --all) -o OUT.ppm|OUT.pfm [options]\n"
            "\n"
            "Writes one slice of a volume across an axis as an image, or with --all a contact sheet\n"
            "of every slice along it (index 0 at the top-left, each tile under its index).\n"
            "Orientation: a z-slice has x to the right and y up; a y-slice x to the right and z up;\n"
            "an x-slice z to the right and y up. Frustum volumes: i to the right, j up (k = depth).\n"
            "\n"
            "  --channel NAME         one channel; three names (R,G,B) make a colour image\n"
            "  --irradiance AXIS      probe volumes: irradiance (lux) facing +x, -x, +y, -y, +z or -z,\n"
            "                         from the sh.* channels (Ramamoorthi-Hanrahan), as colour\n"
            "  --axis x|y|z           the axis the slice cuts across\n"
            "  --index K              the slice (0 .. cells along the axis - 1)\n"
            "  --all                  every slice, as a contact sheet\n"
            "  -o, --output FILE      .ppm: 8-bit picture with a legend; .pfm: raw float values\n"
            "                         (Pf for one channel, PF for three; little-endian, rows bottom\n"
            "                         to top; no tone map, no legend)\n"
            "  --scale N              pixels per cell, 1..64 (default: PPM so the long side is at\n"
            "                         least 256 px, 64 px per sheet tile; PFM 1)\n"
            "  --exposure EV          radiance (PPM): show k*value with k = 2^EV (default: automatic,\n"
            "                         the 99th percentile at 0.8 of white; the EV used is printed)\n"
            "  --range LO,HI          scalar and signed channels (PPM): the values at the colour\n"
            "                         bar's ends (default: the slice's min..max; 0..1 for occupancy,\n"
            "                         transmittance and validity; signed: -max|v|..+max|v|)\n"
            "  --no-legend            PPM without the legend strip\n"
            "  -h, --help             this text\n"
            "\n"
            "Colours: radiance channels (units cd/m2) are tone-mapped with x/(1+x) and sRGB-encoded,\n"
            "grey for one channel; signed SH coefficients (dir.*1-3, sh.*1-8) use a blue-white-red\n"
            "diverging map; other channels a false-colour map rising evenly in lightness.\n"
            "\n"
            "Exit status: 0 written, 1 invalid or corrupt volume, 2 usage error (flags, unknown\n"
            "channel, index out of range), 3 cannot read or write a file.\n");
}


int brm_cmd_slice(int argc, char **argv)
{
    const char *file = NULL, *channels = NULL, *irr = NULL, *axis_s = NULL, *index_s = NULL, *out = NULL;
    const char *scale_s = NULL, *exposure_s = NULL, *range_s = NULL;
    bool all = false, no_legend = false;
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        int r;
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            help(stdout);
            return BRM_EXIT_OK;
        }
        if (brm_cli_flag(argv, i, "--all")) { all = true; continue; }
        if (brm_cli_flag(argv, i, "--no-legend")) { no_legend = true; continue; }
#define OPT(name, var) BRM_CLI_TAKE(CMD, name, var)
        OPT("--channel", channels)
        OPT("--irradiance", irr)
        OPT("--axis", axis_s)
        OPT("--index", index_s)
        OPT("--output", out)
        OPT("-o", out)
        OPT("--scale", scale_s)
        OPT("--exposure", exposure_s)
        OPT("--range", range_s)
#undef OPT
        if (a[0] == '-' && a[1] != '\0') return brm_cli_usage(CMD, "unknown option '%s'", a);
        if (file != NULL) return brm_cli_usage(CMD, "one volume at a time ('%s' and '%s')", file, a);
        file = a;
    }
    if (file == NULL) return brm_cli_usage(CMD, "no volume given; give FILE.brv");
    if ((channels == NULL) == (irr == NULL)) return brm_cli_usage(CMD, "give either --channel NAME[,NAME,NAME] or --irradiance AXIS");
    if (axis_s == NULL) return brm_cli_usage(CMD, "missing --axis x|y|z");
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = brm_axis_parse(axis_s);
    if (o.axis == BRM_AXIS_MAX_ENUM) return brm_cli_usage(CMD, "--axis '%s' is not an axis; give x, y or z", axis_s);
    if (all == (index_s != NULL)) return brm_cli_usage(CMD, "give either --index K or --all");
    if (index_s != NULL && !brm_cli_parse_u32(index_s, &o.index))
        return brm_cli_usage(CMD, "--index '%s' is not a slice number; give an integer from 0", index_s);
    o.all = all;
    if (out == NULL) return brm_cli_usage(CMD, "missing -o OUT.ppm or OUT.pfm");
    if (brm_cli_ends_with(out, ".pfm")) o.pfm = true;
    else if (!brm_cli_ends_with(out, ".ppm")) return brm_cli_usage(CMD, "-o '%s': the name must end in .ppm or .pfm", out);
    if (scale_s != NULL && (!brm_cli_parse_u32(scale_s, &o.scale) || o.scale < 1 || o.scale > 64))
        return brm_cli_usage(CMD, "--scale '%s' is not a magnification; give an integer from 1 to 64", scale_s);
    if (exposure_s != NULL) {
        if (!brm_cli_parse_double(exposure_s, &o.exposure_ev))
            return brm_cli_usage(CMD, "--exposure '%s' is not a number; give an EV such as -2.5", exposure_s);
        o.exposure_set = true;
    }
    if (range_s != NULL) {
        char lo[64], hi[64];
        const char *comma = strchr(range_s, ',');
        size_t ln = comma ? (size_t)(comma - range_s) : 0;
        if (comma == NULL || ln >= sizeof lo || strlen(comma + 1) >= sizeof hi)
            return brm_cli_usage(CMD, "--range '%s' is not LO,HI", range_s);
        memcpy(lo, range_s, ln);
        lo[ln] = '\0';
        snprintf(hi, sizeof hi, "%s", comma + 1);
        if (!brm_cli_parse_double(lo, &o.range_lo) || !brm_cli_parse_double(hi, &o.range_hi) ||
            !(o.range_lo < o.range_hi))
            return brm_cli_usage(CMD, "--range '%s' is not LO,HI with LO < HI", range_s);
        o.range_set = true;
    }
    o.no_legend = no_legend;
    if (o.pfm && (o.exposure_set || o.range_set || o.no_legend))
        return brm_cli_usage(CMD, "--exposure, --range and --no-legend apply to .ppm pictures; a .pfm holds the raw values");

    brm_diag d;
    brm_diag_init(&d);
    brm_view_source src;
    brm_status st = brm_view_open(file, channels, irr, &src, &d);
    if (st != BRM_OK) {
        if (st == BRM_E_USAGE) return brm_cli_usage(CMD, "%s", d.message);
        brm_cli_error("%s", d.message);
        return brm_status_exit_code(st);
    }
    brm_view_result res;
    st = brm_view_render(&src.in, &o, &res, &d);
    brm_view_source_free(&src);
    if (st != BRM_OK) {
        if (st == BRM_E_USAGE) return brm_cli_usage(CMD, "%s: %s", file, d.message);
        brm_cli_error("%s: %s", file, d.message);
        return brm_status_exit_code(st);
    }
    st = brm_write_file_atomic(out, res.bytes, res.len, &d);
    if (st != BRM_OK) {
        brm_view_result_free(&res);
        brm_cli_error("%s", d.message);
        return brm_status_exit_code(st);
    }
    char where[48];
    if (o.all) snprintf(where, sizeof where, "every %s slice", axis_s);
    else snprintf(where, sizeof where, "%s=%u", axis_s, o.index);
    if (o.pfm)
        printf("wrote %s: %ux%u PFM, %s, %s\n", out, res.width, res.height, where,
               src.in.channel_count == 3 ? "3 channels" : "1 channel");
    else if (res.mode == BRM_VIEW_MODE_RADIANCE)
        printf("wrote %s: %ux%u PPM, %s, exposure EV %+.3f%s\n", out, res.width, res.height, where,
               res.exposure_ev, o.exposure_set ? "" : " (automatic)");
    else
        printf("wrote %s: %ux%u PPM, %s, colour bar %.6g to %.6g\n", out, res.width, res.height, where,
               res.range_lo, res.range_hi);
    brm_view_result_free(&res);
    return BRM_EXIT_OK;
}
