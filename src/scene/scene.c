/* The scene model's small helpers: freeing, lookup and the sky gradient. */
#include "scene/scene.h"

#include <stdlib.h>
#include <string.h>

void brm_scene_free(brm_scene *s)
{
    if (!s) return;
    free(s->objects);
    free(s->tris);
    free(s->lights);
    free(s->media);
    if (s->targets)
        for (uint32_t i = 0; i < s->target_count; i++) free(s->targets[i].json_text);
    free(s->targets);
    free(s->files);
    free(s->shared_json_text);
    free(s->noise);
    free(s);
}

int brm_scene_find_target(const brm_scene *s, const char *name)
{
    for (uint32_t i = 0; i < s->target_count; i++)
        if (strcmp(s->targets[i].name, name) == 0) return (int)i;
    return -1;
}

brm_vec3 brm_sky_radiance(const brm_sky *sky, brm_vec3 dir)
{
    if (!sky->present) return brm_v3(0.0, 0.0, 0.0);
    /* SPEC.md "Sky": linear in the direction's y from horizon (y = 0) to zenith (y = 1) and
     * from horizon to ground (y = −1). */
    double y = brm_clamp(dir.y, -1.0, 1.0);
    if (y >= 0.0) return brm_madd(brm_scale(sky->horizon, 1.0 - y), sky->zenith, y);
    return brm_madd(brm_scale(sky->horizon, 1.0 + y), sky->ground, -y);
}
