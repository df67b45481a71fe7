/* The light set of the frustum benchmark (issue: "one sun and eight local lights of 15 m range
 * spread through the frustum"), shared by bench_targets and bench_shadow: the scene's sun and
 * eight point lights along the camera's view, a metre and a half either side of its centre line.
 * Replaces the scene's lights. Invented placement, for measurement only. */
#ifndef BRM_BENCH_LIGHTS_H
#define BRM_BENCH_LIGHTS_H

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "scene/scene.h"

static inline void bench_frustum_lights(brm_scene *s, const brm_target *ft)
{
    brm_light sun = {0};
    for (uint32_t l = 0; l < s->light_count; l++)
        if (s->lights[l].type == BRM_LIGHT_DIRECTIONAL) sun = s->lights[l];
    brm_light *lights = realloc(s->lights, (s->light_count > 9 ? s->light_count : 9) * sizeof *lights);
    if (!lights) exit(1);
    s->lights = lights;
    s->light_count = 9;
    s->lights[0] = sun;
    brm_vec3 eye = ft->camera.position, fwd = brm_norm(brm_sub(ft->camera.look_at, eye));
    brm_vec3 side = brm_norm(brm_cross(fwd, brm_v3(0, 1, 0)));
    for (int i = 0; i < 8; i++) {
        brm_light *l = &s->lights[1 + i];
        memset(l, 0, sizeof *l);
        l->type = BRM_LIGHT_POINT;
        l->position = brm_add(brm_madd(eye, fwd, 2.0 + 1.6 * i), brm_scale(side, (i & 1) ? 1.5 : -1.5));
        l->position.y = 2.5 + 0.3 * (i % 3);
        l->intensity_cd = 300;
        l->range_m = 15;
        l->color = brm_v3(1, 0.9, 0.8);
        l->shadow = true;
        l->softness_texels = 1.5;
        snprintf(l->json_path, sizeof l->json_path, "lights[%d]", 1 + i);
    }
}

#endif
