# cython: language_level=3, boundscheck=False, wraparound=False
"""A Cython wrapper of globemill's C ABI: bake a world from its JSON spec into numpy arrays.

Only the C ABI (globemill.h + libglobemill) is used, not the Python package, so this is how a
Python-embedding engine or tool would reach the core. Arrays own their memory; the copies run with
the GIL released.

    bake = globemill_cy.Bake(spec_json_text, tolerance_m=0.0)
    bake.vertices()            # (V, 3) float64 pool positions
    bake.level_triangles(0)    # (T, 3) uint32 pool ids of level 0
    bake.chunk(0, 5)           # dict of one chunk's own mesh on level 0
    bake.collider(5)           # (positions (n, 3) float64, triangles (t, 3) uint32)
    bake.warnings              # the spec's deprecation messages (gm_world_warnings), str each
"""
from libc.stdint cimport int32_t, uint8_t, uint32_t, uint64_t

import numpy as np

cdef extern from "globemill.h" nogil:
    ctypedef enum gm_status:
        GM_OK
    ctypedef struct gm_error:
        int32_t status
        int32_t truncated
        char message[1024]
    ctypedef struct gm_world:
        pass
    ctypedef struct gm_bake:
        pass
    ctypedef void (*gm_progress_fn)(void* user, int32_t round, uint64_t triangles)
    ctypedef struct gm_bake_options:
        uint32_t struct_size
        int32_t threads
        double tolerance_m
        double ratio
        int32_t levels
        int32_t chunk_level
        int32_t offset
        int32_t collision
        uint64_t max_triangles
        gm_progress_fn progress
        void* progress_user
        int32_t accept_over_tolerance
    ctypedef struct gm_bake_info:
        uint64_t vertex_count
        uint32_t level_count
        uint32_t chunk_count
        int32_t seams
        int32_t has_colliders
        double skirt_depth_m
        double collision_tolerance_m
        double collision_max_error_m
        uint64_t collision_triangles
        uint64_t collision_max_triangles_per_chunk
    ctypedef struct gm_level_info:
        double tolerance_m
        double max_error_m
        double mesh_to_surface_m
        double surface_to_mesh_m
        uint64_t vertex_count
        uint64_t triangle_count
        uint64_t repaired
        uint64_t stitch_failures
    ctypedef struct gm_chunk_info:
        uint64_t vertex_count
        uint64_t surface_vertex_count
        uint64_t triangle_count
        uint64_t interior_count
        uint64_t skirt_triangle_count
        uint64_t stitched_triangle_count[8]
        uint32_t neighbors[3]
        uint32_t corners[3]

    int GM_VERTEX_POSITION, GM_VERTEX_DIRECTION, GM_VERTEX_NORMAL, GM_VERTEX_MORPH

    const char* gm_version_string()
    gm_status gm_world_create(gm_world** world, const char* spec_json, size_t spec_length, gm_error* err)
    void gm_world_destroy(gm_world* world)
    gm_status gm_world_warnings(char* text, size_t text_capacity, size_t* text_length, const gm_world* world, gm_error* err)
    void gm_bake_options_init(gm_bake_options* options)
    gm_status gm_bake_create(gm_bake** bake, const gm_world* world, const gm_bake_options* options, gm_error* err)
    void gm_bake_destroy(gm_bake* bake)
    gm_status gm_bake_get_info(gm_bake_info* info, const gm_bake* bake, gm_error* err)
    gm_status gm_bake_level_info(gm_level_info* info, const gm_bake* bake, uint32_t level, gm_error* err)
    gm_status gm_bake_vertex_data(double* dst, size_t cap, const gm_bake* bake, int32_t which, gm_error* err)
    gm_status gm_bake_level_triangles(uint32_t* dst, size_t cap, const gm_bake* bake, uint32_t level, gm_error* err)
    gm_status gm_bake_level_triangle_chunks(uint32_t* dst, size_t cap, const gm_bake* bake, uint32_t level, gm_error* err)
    gm_status gm_bake_level_morph(double* dst, size_t cap, const gm_bake* bake, uint32_t level, gm_error* err)
    gm_status gm_chunk_get_info(gm_chunk_info* info, const gm_bake* bake, uint32_t level, uint32_t chunk, gm_error* err)
    gm_status gm_chunk_vertex_ids(uint32_t* dst, size_t cap, const gm_bake* bake, uint32_t level, uint32_t chunk, gm_error* err)
    gm_status gm_chunk_vertex_data(double* dst, size_t cap, const gm_bake* bake, uint32_t level, uint32_t chunk, int32_t which, gm_error* err)
    gm_status gm_chunk_triangles(uint32_t* dst, size_t cap, const gm_bake* bake, uint32_t level, uint32_t chunk, gm_error* err)
    gm_status gm_chunk_stitched(uint32_t* dst, size_t cap, const gm_bake* bake, uint32_t level, uint32_t chunk, uint32_t mask, gm_error* err)
    gm_status gm_collider_counts(uint64_t* vertex_count, uint64_t* triangle_count, const gm_bake* bake, uint32_t chunk, gm_error* err)
    gm_status gm_collider_positions(double* dst, size_t cap, const gm_bake* bake, uint32_t chunk, gm_error* err)
    gm_status gm_collider_triangles(uint32_t* dst, size_t cap, const gm_bake* bake, uint32_t chunk, gm_error* err)


class GlobemillError(RuntimeError):
    """A failed C ABI call: .status is the gm_status code, the message is the library's."""

    def __init__(self, int status, str message):
        super().__init__(message)
        self.status = status


cdef inline int _check(gm_status s, gm_error* err) except -1:
    if s != GM_OK:
        raise GlobemillError(<int>s, err.message.decode("utf-8", "replace"))
    return 0


def version():
    """The loaded library's version string."""
    return gm_version_string().decode()


cdef list _warnings(const gm_world* world):
    """The world's deprecation messages (gm_world_warnings), one str per line."""
    cdef size_t n = 0
    cdef gm_error err
    _check(gm_world_warnings(NULL, 0, &n, world, &err), &err)
    if n == 0:
        return []
    cdef bytearray text = bytearray(n + 1)
    _check(gm_world_warnings(text, n + 1, &n, world, &err), &err)
    return bytes(text[:n]).decode("utf-8").split("\n")


cdef class Bake:
    """Every level, chunk and collider of one world, baked through the C ABI.

    warnings : the spec's deprecation messages (keys in a renamed spelling), one str each
    """

    cdef gm_bake* _bake
    cdef gm_bake_info _info
    cdef readonly list warnings

    def __cinit__(self, spec_json, double tolerance_m=0.0, int threads=0, bint collision=True):
        cdef bytes text = spec_json.encode("utf-8") if isinstance(spec_json, str) else bytes(spec_json)
        cdef const char* p = text
        cdef size_t n = len(text)
        cdef gm_error err
        cdef gm_world* world = NULL
        cdef gm_bake_options opt
        cdef gm_status s
        self._bake = NULL
        with nogil:
            s = gm_world_create(&world, p, n, &err)
        _check(s, &err)
        try:
            self.warnings = _warnings(world)
        except BaseException:
            gm_world_destroy(world)
            raise
        gm_bake_options_init(&opt)
        opt.tolerance_m = tolerance_m
        opt.threads = threads
        opt.collision = 1 if collision else 0
        with nogil:
            s = gm_bake_create(&self._bake, world, &opt, &err)
            gm_world_destroy(world)  # the bake does not need the world any more
        _check(s, &err)
        gm_bake_get_info(&self._info, self._bake, NULL)

    def __dealloc__(self):
        gm_bake_destroy(self._bake)

    @property
    def level_count(self):
        return self._info.level_count

    @property
    def chunk_count(self):
        return self._info.chunk_count

    def _pool(self, int which):
        cdef gm_error err
        cdef uint64_t V = self._info.vertex_count
        out = np.empty((V, 3), np.float64)
        cdef double[:, ::1] view = out
        cdef gm_status s
        with nogil:
            s = gm_bake_vertex_data(&view[0, 0] if V else NULL, 3 * V, self._bake, which, &err)
        _check(s, &err)
        return out

    def vertices(self):
        """(V, 3) float64: the shared vertex pool (every level's vertices), metres."""
        return self._pool(GM_VERTEX_POSITION)

    def directions(self):
        """(V, 3) float64 unit directions of the pool vertices."""
        return self._pool(GM_VERTEX_DIRECTION)

    def normals(self):
        """(V, 3) float64 analytic unit normals at the pool vertices."""
        return self._pool(GM_VERTEX_NORMAL)

    def level_info(self, uint32_t level):
        """Counts and measured errors of one level, as a dict."""
        cdef gm_level_info li
        cdef gm_error err
        _check(gm_bake_level_info(&li, self._bake, level, &err), &err)
        return li

    def level_triangles(self, uint32_t level):
        """(T, 3) uint32 pool ids of one level's triangles, grouped by chunk."""
        cdef gm_level_info li
        cdef gm_error err
        _check(gm_bake_level_info(&li, self._bake, level, &err), &err)
        out = np.empty((li.triangle_count, 3), np.uint32)
        cdef uint32_t[:, ::1] view = out
        cdef gm_status s
        with nogil:
            s = gm_bake_level_triangles(&view[0, 0] if li.triangle_count else NULL,
                                        3 * li.triangle_count, self._bake, level, &err)
        _check(s, &err)
        return out

    def level_chunks(self, uint32_t level):
        """(T,) uint32 chunk of each of one level's triangles."""
        cdef gm_level_info li
        cdef gm_error err
        _check(gm_bake_level_info(&li, self._bake, level, &err), &err)
        out = np.empty(li.triangle_count, np.uint32)
        cdef uint32_t[::1] view = out
        cdef gm_status s
        with nogil:
            s = gm_bake_level_triangle_chunks(&view[0] if li.triangle_count else NULL,
                                              li.triangle_count, self._bake, level, &err)
        _check(s, &err)
        return out

    def level_morph(self, uint32_t level):
        """(V, 3) float64: every pool vertex's position on the next coarser level."""
        cdef gm_error err
        cdef uint64_t V = self._info.vertex_count
        out = np.empty((V, 3), np.float64)
        cdef double[:, ::1] view = out
        cdef gm_status s
        with nogil:
            s = gm_bake_level_morph(&view[0, 0] if V else NULL, 3 * V, self._bake, level, &err)
        _check(s, &err)
        return out

    def chunk(self, uint32_t level, uint32_t chunk):
        """One chunk on one level as its own mesh: a dict with vertex_ids (n,) uint32,
        positions / normals / morph (n, 3) float64, triangles (t, 3) uint32 local, interior (int)
        and stitched {mask: (s, 3) uint32 local} for the masks that have triangles."""
        cdef gm_chunk_info ci
        cdef gm_error err
        _check(gm_chunk_get_info(&ci, self._bake, level, chunk, &err), &err)
        ids = np.empty(ci.surface_vertex_count, np.uint32)
        cdef uint32_t[::1] idv = ids
        _check(gm_chunk_vertex_ids(&idv[0] if ci.surface_vertex_count else NULL,
                                   ci.surface_vertex_count, self._bake, level, chunk, &err), &err)
        out = {"vertex_ids": ids, "interior": int(ci.interior_count), "stitched": {}}
        cdef double[:, ::1] dv
        for name, which in (("positions", GM_VERTEX_POSITION), ("normals", GM_VERTEX_NORMAL),
                            ("morph", GM_VERTEX_MORPH)):
            a = np.empty((ci.vertex_count, 3), np.float64)
            dv = a
            _check(gm_chunk_vertex_data(&dv[0, 0] if ci.vertex_count else NULL, 3 * ci.vertex_count,
                                        self._bake, level, chunk, which, &err), &err)
            out[name] = a
        tris = np.empty((ci.triangle_count, 3), np.uint32)
        cdef uint32_t[:, ::1] tv = tris
        _check(gm_chunk_triangles(&tv[0, 0] if ci.triangle_count else NULL, 3 * ci.triangle_count,
                                  self._bake, level, chunk, &err), &err)
        out["triangles"] = tris
        cdef uint32_t mask
        for mask in range(1, 8):
            n = ci.stitched_triangle_count[mask]
            if n == 0:
                continue
            st = np.empty((n, 3), np.uint32)
            tv = st
            _check(gm_chunk_stitched(&tv[0, 0], 3 * n, self._bake, level, chunk, mask, &err), &err)
            out["stitched"][mask] = st
        return out

    def collider(self, uint32_t chunk):
        """One chunk's collider: positions (n, 3) float64 and triangles (t, 3) uint32 local."""
        cdef uint64_t nv = 0, nt = 0
        cdef gm_error err
        _check(gm_collider_counts(&nv, &nt, self._bake, chunk, &err), &err)
        pos = np.empty((nv, 3), np.float64)
        tris = np.empty((nt, 3), np.uint32)
        cdef double[:, ::1] pv = pos
        cdef uint32_t[:, ::1] tv = tris
        _check(gm_collider_positions(&pv[0, 0] if nv else NULL, 3 * nv, self._bake, chunk, &err), &err)
        _check(gm_collider_triangles(&tv[0, 0] if nt else NULL, 3 * nt, self._bake, chunk, &err), &err)
        return pos, tris
