/* brume export FILE.brv --channel NAME -o OUT.f32: one channel as raw little-endian float32,
 * x fastest, then y, then z; written atomically. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/atomic_file.h"
#include "brume/brv.h"
#include "cli/cli.h"

static const char export_help[] =
    "usage: brume export FILE.brv --channel NAME -o OUT.f32\n"
    "\n"
    "Writes one channel of the whole grid as raw little-endian IEEE 754 float32 values, x\n"
    "fastest, then y, then z (cells[0]*cells[1]*cells[2] values, no header; 'brume info' gives\n"
    "the cell counts). The output is written to a temporary file next to OUT and renamed, so\n"
    "a failure leaves any previous OUT untouched.\n"
    "\n"
    "  --channel NAME   the channel to export (see 'brume info FILE.brv')\n"
    "  -o, --output OUT the output file\n"
    "\n"
    "Exit status: 0 ok; 1 the volume is corrupt or not a volume; 2 a usage error (also an\n"
    "unknown channel); 3 a file cannot be read or written.\n";

int brm_cmd_export(int argc, char **argv)
{
    const char *path = NULL, *channel = NULL, *out = NULL;
    for (int i = 1; i < argc; i++) {
        int k;
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            fputs(export_help, stdout);
            return BRM_EXIT_OK;
        }
        if ((k = brm_cli_opt("export", argc, argv, &i, "--channel", &channel)) != 0) {
            if (k < 0) return BRM_EXIT_USAGE;
            continue;
        }
        if ((k = brm_cli_opt("export", argc, argv, &i, "--output", &out)) != 0 ||
            (k = brm_cli_opt("export", argc, argv, &i, "-o", &out)) != 0) {
            if (k < 0) return BRM_EXIT_USAGE;
            continue;
        }
        if (argv[i][0] == '-' && argv[i][1] != '\0') return brm_cli_usage("export", "unknown option '%s'", argv[i]);
        if (path) return brm_cli_usage("export", "one volume file at a time ('%s' and '%s' given)", path, argv[i]);
        path = argv[i];
    }
    if (!path) return brm_cli_usage("export", "which volume? give FILE.brv");
    if (!channel) return brm_cli_usage("export", "which channel? give --channel NAME");
    if (!out || !*out) return brm_cli_usage("export", "where to? give -o OUT.f32");
    brv_volume *v = NULL;
    brv_result r = brv_open_file(path, NULL, &v);
    if (r != BRV_OK) {
        brm_cli_error("%s: %s", path, r == BRV_E_IO ? "cannot open or read the file" : brv_result_text(r));
        return r == BRV_E_IO || r == BRV_E_NOMEM ? BRM_EXIT_IO : BRM_EXIT_INPUT;
    }
    int c = brv_channel_find(v, channel);
    if (c < 0) {
        const brv_grid_info *g = brv_grid(v);
        fprintf(stderr, "brume export: %s has no channel '%s'; its channels are:", path, channel);
        for (uint32_t k = 0; k < g->channel_count; k++) fprintf(stderr, "%s %s", k ? "," : "", brv_channel(v, k)->name);
        fprintf(stderr, "\nTry 'brume export --help'.\n");
        brv_free(v);
        return BRM_EXIT_USAGE;
    }
    size_t n = brv_channel_size(v);
    float *vals = malloc(n * sizeof *vals);
    unsigned char *bytes = malloc(n * 4);
    int rc = BRM_EXIT_OK;
    if (!vals || !bytes) {
        brm_cli_error("%s: out of memory for %zu values", path, n);
        rc = BRM_EXIT_IO;
    } else if ((r = brv_decode_channel(v, (uint32_t)c, vals, n)) != BRV_OK) {
        brm_cli_error("%s: channel '%s': %s", path, channel, brv_result_text(r));
        rc = r == BRV_E_NOMEM ? BRM_EXIT_IO : BRM_EXIT_INPUT;
    } else {
        for (size_t i = 0; i < n; i++) { /* little-endian whatever the host */
            uint32_t u;
            memcpy(&u, &vals[i], 4);
            for (int b = 0; b < 4; b++) bytes[4 * i + b] = (unsigned char)(u >> (8 * b));
        }
        brm_diag d;
        brm_diag_init(&d);
        if (brm_write_file_atomic(out, bytes, n * 4, &d) != BRM_OK) {
            brm_cli_error("%s", d.message);
            rc = BRM_EXIT_IO;
        } else {
            const brv_grid_info *g = brv_grid(v);
            fprintf(stderr, "brume export: %s: %u x %u x %u float32 values of '%s' (%zu bytes)\n", out, g->cells[0],
                    g->cells[1], g->cells[2], channel, n * 4);
        }
    }
    free(vals);
    free(bytes);
    brv_free(v);
    return rc;
}
