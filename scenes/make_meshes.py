#!/usr/bin/env python3
"""Writes the OBJ meshes of the saltworks-dusk demo scene into meshes/.

The hall is an old salt works' boiling house, 24 m x 8 m x 16 m inside (x east, y up,
z south). Walls and roof are slabs with their openings cut into the geometry: tall windows
in the west wall, a doorway in the south wall, three skylights in the roof. Each slab is a
watertight, consistently wound mesh built on a lattice of the opening edges (every edge is
shared by exactly two triangles, counter-clockwise seen from outside); the script checks
that before writing. The boiler is a closed cylinder. Run: python3 scenes/make_meshes.py
"""
import math
import os
import sys

HERE = os.path.dirname(os.path.abspath(__file__))


def slab(axis_u, axis_v, axis_w, u_range, v_range, w_range, holes):
    """A slab spanning u_range x v_range in-plane and w_range thick, with rectangular holes
    ((u0, u1, v0, v1) each) cut through it. Returns (vertices, triangles)."""
    us = sorted({u_range[0], u_range[1], *[h[0] for h in holes], *[h[1] for h in holes]})
    vs = sorted({v_range[0], v_range[1], *[h[2] for h in holes], *[h[3] for h in holes]})

    def solid(a, b):
        if a < 0 or b < 0 or a >= len(us) - 1 or b >= len(vs) - 1:
            return False
        cu, cv = 0.5 * (us[a] + us[a + 1]), 0.5 * (vs[b] + vs[b + 1])
        return not any(h[0] < cu < h[1] and h[2] < cv < h[3] for h in holes)

    verts, index, tris = [], {}, []

    def vert(a, b, layer):
        key = (a, b, layer)
        if key not in index:
            p = [0.0, 0.0, 0.0]
            p[axis_u], p[axis_v], p[axis_w] = us[a], vs[b], w_range[layer]
            index[key] = len(verts)
            verts.append(tuple(p))
        return index[key]

    def quad(q, outward):
        """Two triangles of quad q (4 vertex ids in order around it), wound so that their
        normal points along outward (a world axis vector)."""
        p = [verts[i] for i in q]
        e1 = [p[1][k] - p[0][k] for k in range(3)]
        e2 = [p[2][k] - p[0][k] for k in range(3)]
        n = (e1[1] * e2[2] - e1[2] * e2[1], e1[2] * e2[0] - e1[0] * e2[2], e1[0] * e2[1] - e1[1] * e2[0])
        if sum(n[k] * outward[k] for k in range(3)) < 0:
            q = [q[0], q[3], q[2], q[1]]
        tris.append((q[0], q[1], q[2]))
        tris.append((q[0], q[2], q[3]))

    def axis_vec(axis, sign):
        v = [0.0, 0.0, 0.0]
        v[axis] = sign
        return v

    for a in range(len(us) - 1):
        for b in range(len(vs) - 1):
            if not solid(a, b):
                continue
            for layer, sign in ((0, -1.0), (1, 1.0)):
                quad([vert(a, b, layer), vert(a + 1, b, layer), vert(a + 1, b + 1, layer), vert(a, b + 1, layer)],
                     axis_vec(axis_w, sign))
            if not solid(a - 1, b):
                quad([vert(a, b, 0), vert(a, b + 1, 0), vert(a, b + 1, 1), vert(a, b, 1)], axis_vec(axis_u, -1.0))
            if not solid(a + 1, b):
                quad([vert(a + 1, b, 0), vert(a + 1, b + 1, 0), vert(a + 1, b + 1, 1), vert(a + 1, b, 1)],
                     axis_vec(axis_u, 1.0))
            if not solid(a, b - 1):
                quad([vert(a, b, 0), vert(a + 1, b, 0), vert(a + 1, b, 1), vert(a, b, 1)], axis_vec(axis_v, -1.0))
            if not solid(a, b + 1):
                quad([vert(a, b + 1, 0), vert(a + 1, b + 1, 0), vert(a + 1, b + 1, 1), vert(a, b + 1, 1)],
                     axis_vec(axis_v, 1.0))
    return verts, tris


def cylinder(radius, height, segments):
    """A closed upright cylinder, base centred at the origin."""
    verts = [(0.0, 0.0, 0.0), (0.0, height, 0.0)]
    for s in range(segments):
        t = 2.0 * math.pi * s / segments
        x, z = radius * math.cos(t), radius * math.sin(t)
        verts.append((x, 0.0, z))
        verts.append((x, height, z))
    tris = []
    for s in range(segments):
        b0, t0 = 2 + 2 * s, 3 + 2 * s
        b1, t1 = 2 + 2 * ((s + 1) % segments), 3 + 2 * ((s + 1) % segments)
        tris += [(b0, t0, t1), (b0, t1, b1)]   # side, outward
        tris.append((0, b0, b1))               # bottom, facing -y
        tris.append((1, t1, t0))               # top, facing +y
    return verts, tris


def check_closed(name, verts, tris):
    """Every directed edge once, and its reverse once: watertight and consistently wound."""
    directed = {}
    for t in tris:
        for k in range(3):
            e = (t[k], t[(k + 1) % 3])
            directed[e] = directed.get(e, 0) + 1
    for (a, b), n in directed.items():
        if n != 1 or directed.get((b, a), 0) != 1:
            sys.exit(f"{name}: edge {a}-{b} is not shared by exactly two consistently wound triangles")
    # Outward winding: the signed volume is positive.
    vol = 0.0
    for a, b, c in tris:
        pa, pb, pc = verts[a], verts[b], verts[c]
        vol += (pa[0] * (pb[1] * pc[2] - pb[2] * pc[1]) - pa[1] * (pb[0] * pc[2] - pb[2] * pc[0]) +
                pa[2] * (pb[0] * pc[1] - pb[1] * pc[0])) / 6.0
    if vol <= 0.0:
        sys.exit(f"{name}: triangles face inward (signed volume {vol})")
    return vol


def write_obj(name, comment, verts, tris):
    vol = check_closed(name, verts, tris)
    path = os.path.join(HERE, "meshes", name)
    with open(path, "w", newline="\n") as f:
        f.write(f"# {name}: {comment}\n")
        f.write(f"# generated by scenes/make_meshes.py; {len(verts)} vertices, {len(tris)} triangles, "
                f"closed, volume {vol:.3f} m3\n")
        for v in verts:
            f.write("v %.4f %.4f %.4f\n" % v)
        for t in tris:
            f.write("f %d %d %d\n" % (t[0] + 1, t[1] + 1, t[2] + 1))
    print(f"{path}: {len(verts)} vertices, {len(tris)} triangles")


X, Y, Z = 0, 1, 2
# West wall, x in [-0.4, 0]: four tall windows facing the low western sun.
windows = [(1.4, 3.0, 1.2, 6.4), (5.0, 6.6, 1.2, 6.4), (9.4, 11.0, 1.2, 6.4), (13.0, 14.6, 1.2, 6.4)]
write_obj("west_wall.obj", "west wall, 0.4 m thick, four tall windows",
          *slab(Z, Y, X, (-0.4, 16.4), (0.0, 8.0), (-0.4, 0.0), windows))
# South wall, z in [16, 16.4]: the doorway the frustum camera looks in from, and a high window.
write_obj("south_wall.obj", "south wall, 0.4 m thick, a doorway and a high window",
          *slab(X, Y, Z, (-0.4, 24.4), (0.0, 8.0), (16.0, 16.4), [(10.8, 13.4, 0.0, 3.4), (18.0, 21.0, 4.5, 6.5)]))
# Roof, y in [8, 8.3]: three skylights along the hall over the pans and the boiler.
write_obj("roof.obj", "roof slab, 0.3 m thick, three skylights",
          *slab(X, Z, Y, (-0.4, 24.4), (-0.4, 16.4), (8.0, 8.3),
                [(4.0, 7.0, 5.5, 9.5), (10.5, 13.5, 5.5, 9.5), (17.5, 20.5, 2.0, 5.0)]))
write_obj("boiler.obj", "boiler drum, a closed cylinder 1.1 m radius, 3.6 m high, base at the origin",
          *cylinder(1.1, 3.6, 24))
