/* A scene with every kind of light, medium and target, for bake tests that need all of the
 * baker at once (test_cpu_paths.c, test_revision.c). */
#ifndef BRM_TEST_EVERY_KIND_SCENE_H
#define BRM_TEST_EVERY_KIND_SCENE_H

/* The demo's lights, media and sky around boxes and a sphere (no meshes), with small targets. */
static const char *const SCENE =
    "{\"brume\":1,\"name\":\"paths\",\"fog_bounds\":{\"min\":[0,0,0],\"max\":[12,5,8]},"
    "\"geometry\":["
    "{\"shape\":\"box\",\"min\":[-0.4,-0.3,-0.4],\"max\":[12.4,0,8.4]},"
    "{\"shape\":\"box\",\"min\":[-0.4,0,-0.4],\"max\":[12.4,5,0]},"
    "{\"shape\":\"box\",\"min\":[2,0,2],\"max\":[5,0.8,4]},"
    "{\"shape\":\"box\",\"min\":[3,4.2,-0.4],\"max\":[9,4.5,8.4]},"
    "{\"shape\":\"sphere\",\"center\":[8.5,1.2,5.5],\"radius\":1.1}],"
    "\"lights\":["
    "{\"type\":\"directional\",\"direction\":[0.82,-0.45,0.35],\"illuminance_lux\":30000,\"color\":[1,0.78,0.55]},"
    "{\"type\":\"point\",\"position\":[4,3.5,3],\"intensity_cd\":450,\"range_m\":7},"
    "{\"type\":\"point\",\"position\":[10,2.5,6],\"flux_lm\":3000},"
    "{\"type\":\"spot\",\"position\":[6,3.7,7.8],\"direction\":[0,-0.35,-1],\"inner_deg\":18,"
    "\"outer_deg\":30,\"flux_lm\":2500,\"range_m\":12,\"shadow\":{\"resolution\":256,\"softness_texels\":1.5}}],"
    "\"media\":["
    "{\"type\":\"uniform\",\"visibility_m\":90,\"phase\":{\"model\":\"henyey-greenstein\",\"g\":0.35}},"
    "{\"type\":\"height\",\"extinction_per_m\":0.09,\"base_y\":0.3,\"scale_height_m\":1.4},"
    "{\"type\":\"box\",\"min\":[2,0.8,2],\"max\":[5,3.0,4],\"extinction_per_m\":0.25,\"edge_fade_m\":0.6,"
    "\"phase\":{\"model\":\"henyey-greenstein\",\"g\":0.55}},"
    "{\"type\":\"box\",\"min\":[7,0.5,1],\"max\":[10,2.5,3],\"extinction_per_m\":0.2},"
    "{\"type\":\"noise\",\"scale_m\":2.5,\"octaves\":4,\"seed\":1871,\"strength\":0.55}],"
    "\"sky\":{\"zenith\":[450,600,900],\"horizon\":[900,760,600],\"ground\":[90,75,60]},"
    "\"targets\":["
    "{\"name\":\"world\",\"grid\":\"world\",\"min\":[0,0,0],\"max\":[12,5,8],\"cells\":[36,15,24],\"samples\":2},"
    "{\"name\":\"view\",\"grid\":\"frustum\",\"camera\":{\"position\":[11.5,1.7,7.5],\"look_at\":[4,2.2,1.5],"
    "\"up\":[0,1,0],\"fov_y_deg\":60,\"aspect\":1.7778,\"near\":0.3,\"far\":16},\"cells\":[32,18,24],\"samples\":2},"
    "{\"name\":\"probes\",\"grid\":\"probes\",\"min\":[1,1,1],\"max\":[11,4,7],\"spacing_m\":2.5,\"rays\":64}]}";

#endif
