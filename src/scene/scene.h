/* The scene model: what a scene file describes, in world space, validated and ready to bake.
 *
 * brm_scene_load() is the only producer. Every later stage reads these structs and never
 * writes them. Units: metres, degrees on input (radians/cosines precomputed here), lux,
 * candela, cd/m². y is up, right-handed. */
#ifndef BRM_SCENE_H
#define BRM_SCENE_H

#include <stdbool.h>
#include <stdint.h>

#include "base/diag.h"
#include "base/vec.h"

#define BRM_NAME_MAX 64         /* scene and target names, including the NUL */
#define BRM_PATH_MAX 4096
#define BRM_MAX_MEDIA 16        /* media per scene; more is refused at load */

/* ---- geometry ------------------------------------------------------------------------ */

typedef enum brm_shape {
    BRM_SHAPE_INVALID = 0,
    BRM_SHAPE_BOX,
    BRM_SHAPE_SPHERE,
    BRM_SHAPE_MESH,
    BRM_SHAPE_MAX_ENUM
} brm_shape;

typedef struct brm_object {
    brm_shape shape;
    brm_aabb bounds;        /* world bounds (for a box: the box itself) */
    brm_vec3 center;        /* sphere */
    double radius;          /* sphere */
    brm_vec3 albedo;        /* surface albedo, default 0.5 */
    uint32_t first_tri;     /* boxes and meshes: their triangles in brm_scene.tris */
    uint32_t tri_count;     /* spheres have none: every stage treats them analytically */
    bool closed;            /* mesh: every edge shared by exactly two triangles (watertight);
                               boxes and spheres are always closed */
    uint32_t file_index;    /* mesh: index into brm_scene.files */
} brm_object;

/* A world-space triangle of a box or a mesh, after scale, rotation and translation.
 * Winding as in the file (counter-clockwise seen from outside for well-formed meshes). */
typedef struct brm_tri {
    brm_vec3 v[3];
    uint32_t object;        /* index into brm_scene.objects */
} brm_tri;

/* A file the scene references (meshes now; others later), for up-to-date checks. */
typedef struct brm_file_ref {
    char path[BRM_PATH_MAX];    /* as resolved (relative to the scene file's folder) */
    uint8_t sha256[32];         /* of the file's bytes as loaded */
} brm_file_ref;

/* ---- lights ------------------------------------------------------------------------- */

typedef enum brm_light_type {
    BRM_LIGHT_INVALID = 0,
    BRM_LIGHT_DIRECTIONAL,
    BRM_LIGHT_POINT,
    BRM_LIGHT_SPOT,
    BRM_LIGHT_MAX_ENUM
} brm_light_type;

typedef struct brm_light {
    brm_light_type type;
    brm_vec3 position;          /* point, spot */
    brm_vec3 direction;         /* unit; the direction the light travels (directional, spot) */
    double illuminance_lux;     /* directional: on a surface facing it, outside the fog */
    double intensity_cd;        /* point, spot: given, or from flux_lm (I = Φ/(4π) point,
                                   Φ/(2π(1 − cos outer)) spot) */
    double range_m;             /* 0: no range, pure inverse square */
    double inner_deg, outer_deg;/* spot half-angles, 0 < inner < outer < 90 */
    double cos_inner, cos_outer;
    brm_vec3 color;             /* linear RGB multiplier, default white */
    bool shadow;                /* default true */
    uint32_t shadow_resolution; /* texels per side (per cube face); 0 = automatic */
    double softness_texels;     /* PCF radius in texels, default 1.5 */
    char json_path[32];         /* "lights[2]", for messages */
} brm_light;

/* ---- media -------------------------------------------------------------------------- */

typedef enum brm_phase_model {
    BRM_PHASE_INVALID = 0,
    BRM_PHASE_ISOTROPIC,
    BRM_PHASE_HENYEY_GREENSTEIN,
    BRM_PHASE_SCHLICK,
    BRM_PHASE_RAYLEIGH,
    BRM_PHASE_CORNETTE_SHANKS,
    BRM_PHASE_TWO_LOBE,
    BRM_PHASE_MAX_ENUM
} brm_phase_model;

typedef struct brm_phase {
    brm_phase_model model;      /* default isotropic */
    double g;                   /* HG, Schlick, Cornette-Shanks; two-lobe: g_forward */
    double g_back;              /* two-lobe */
    double forward_weight;      /* two-lobe w */
} brm_phase;

typedef enum brm_medium_type {
    BRM_MEDIUM_INVALID = 0,
    BRM_MEDIUM_UNIFORM,
    BRM_MEDIUM_HEIGHT,
    BRM_MEDIUM_BOX,
    BRM_MEDIUM_NOISE,
    BRM_MEDIUM_MAX_ENUM
} brm_medium_type;

typedef struct brm_medium {
    brm_medium_type type;
    double sigma_t;             /* extinction_per_m, or ln(20)/visibility_m (uniform) */
    double base_y;              /* height */
    double scale_height_m;      /* height */
    brm_aabb box;               /* box */
    double edge_fade_m;         /* box, 0 = hard edge */
    double scale_m;             /* noise */
    uint32_t octaves;           /* noise */
    uint32_t seed;              /* noise */
    double strength;            /* noise */
    brm_vec3 albedo;            /* sigma_s / sigma_t per channel, default 0.9 (not noise) */
    brm_phase phase;            /* not noise */
    /* Filled by brm_media_prepare (media.h) so the inner loops never divide: */
    double inv_scale_height;    /* height: 1/scale_height_m */
    double inv_scale_m;         /* noise: 1/scale_m */
    double inv_edge_fade;       /* box: 1/edge_fade_m, 0 for a hard edge */
} brm_medium;

/* ---- sky ----------------------------------------------------------------------------- */

typedef struct brm_sky {
    bool present;               /* false: black sky, costs nothing */
    brm_vec3 zenith, horizon, ground;   /* radiance in cd/m² */
} brm_sky;

/* ---- targets ------------------------------------------------------------------------- */

typedef enum brm_grid_kind {
    BRM_GRID_INVALID = 0,
    BRM_GRID_WORLD,
    BRM_GRID_FRUSTUM,
    BRM_GRID_PROBES,
    BRM_GRID_MAX_ENUM
} brm_grid_kind;

typedef enum brm_encoding {
    BRM_ENCODING_INVALID = 0,
    BRM_ENCODING_F32,
    BRM_ENCODING_F16,           /* default */
    BRM_ENCODING_COMPACT,       /* rgb9e5 for colour triplets, f16 for the rest */
    BRM_ENCODING_MAX_ENUM
} brm_encoding;

typedef struct brm_camera {
    brm_vec3 position, look_at, up;     /* up defaults to [0, 1, 0] when the file omits it */
    double fov_y_deg, aspect, near, far;
} brm_camera;

typedef struct brm_target {
    char name[BRM_NAME_MAX];
    brm_grid_kind grid;
    brm_aabb box;               /* world, probes: min and max; frustum: bounds of the whole view
                                   pyramid (camera position to the far plane's corners) */
    uint32_t cells[3];          /* world, frustum */
    uint32_t samples;           /* world, frustum: default 4 */
    brm_camera camera;          /* frustum */
    bool keep_froxel_terms;     /* frustum */
    double spacing_m;           /* probes */
    uint32_t rays;              /* probes: default 256 */
    bool relocate;              /* probes */
    brm_encoding encoding;      /* default f16 */
    int compression_level;      /* 1..19, default 9 */
    char json_path[32];         /* "targets[1]", for messages */
    char *json_text;            /* this target's object, canonical JSON (for hashing), owned */
} brm_target;

/* ---- the scene ----------------------------------------------------------------------- */

typedef struct brm_noise_table brm_noise_table;    /* private to media.c */

typedef struct brm_scene {
    char name[BRM_NAME_MAX];
    char path[BRM_PATH_MAX];    /* the scene file as given */
    char dir[BRM_PATH_MAX];     /* its folder, for relative paths */

    brm_aabb fog_bounds;        /* resolved: given, or the bounds of all geometry and targets */
    bool fog_bounds_given;

    brm_object *objects;  uint32_t object_count;
    brm_tri *tris;        uint32_t tri_count;
    uint32_t degenerate_dropped;    /* zero-area mesh triangles dropped at load */
    brm_light *lights;    uint32_t light_count;
    brm_medium *media;    uint32_t medium_count;
    brm_sky sky;
    brm_target *targets;  uint32_t target_count;
    brm_file_ref *files;  uint32_t file_count;

    /* Canonical JSON of everything but the targets (geometry, lights, media, sky, fog bounds),
     * owned; with each target's json_text and the referenced files' hashes it is what decides
     * whether a bake is up to date. */
    char *shared_json_text;

    brm_noise_table *noise;     /* built at load for noise media, owned */
    bool media_ready;           /* brm_media_prepare has run (the loader calls it) */
} brm_scene;

/* Loads and validates a scene file, meshes included. On failure *out is untouched, d holds
 * "file:line:col: path: problem; expected", and the status is BRM_E_INPUT (bad content) or
 * BRM_E_IO (cannot read). Warnings (e.g. dropped degenerate triangles) go to d. */
brm_status brm_scene_load(const char *path, brm_scene **out, brm_diag *d);

/* The same from a buffer; path names the file in messages and sets the folder for meshes. */
brm_status brm_scene_load_memory(const char *json, size_t len, const char *path, brm_scene **out,
                                 brm_diag *d);

/* Options for brm_scene_load_ex; a zeroed struct gives brm_scene_load_memory's behaviour. */
typedef struct brm_scene_load_opts {
    /* Reads a referenced file (a mesh) whole into a malloc'd buffer (*data, *len; the loader
     * frees it). Returns 0, or an errno value for the message. NULL reads from disk. Fuzz
     * harnesses and tests use it to load scenes without touching the disk. */
    int (*read_file)(void *user, const char *path, char **data, size_t *len);
    void *user;
} brm_scene_load_opts;

/* brm_scene_load_memory with options (opts may be NULL). */
brm_status brm_scene_load_ex(const char *json, size_t len, const char *path, const brm_scene_load_opts *opts,
                             brm_scene **out, brm_diag *d);

/* Frees a scene; accepts NULL. */
void brm_scene_free(brm_scene *s);

/* Index of the target called name, or -1. */
int brm_scene_find_target(const brm_scene *s, const char *name);

/* Sky radiance (cd/m²) seen looking toward unit direction dir: linear in dir.y from horizon
 * (y = 0) to zenith (y = 1) and from horizon to ground (y = −1). */
brm_vec3 brm_sky_radiance(const brm_sky *sky, brm_vec3 dir);

#endif
