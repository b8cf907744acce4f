/*
 * globemill.h - the C ABI of globemill: bake the ground of a small round world into level-of-detail
 * chunk meshes and collision meshes from a world spec in JSON.
 *
 * This header is the manual: everything a host (a C or C++ engine, C# through P/Invoke, Cython,
 * any FFI) needs is written here. It is plain C99 and has no dependency beyond <stddef.h> and
 * <stdint.h>.
 *
 * ---------------------------------------------------------------------------------------------
 * CONVENTIONS
 *
 * Handles.  Two opaque handles: gm_world (a validated spec and its terrain field) and gm_bake
 *   (every level, chunk, seam variant, morph target, attribute and collider of one bake). Each is
 *   created by a *_create call and released by the matching *_destroy call; destroy accepts NULL.
 *   A gm_bake does not refer to its gm_world: the world may be destroyed first.
 *
 * Status and message.  Every call that can fail returns a gm_status (GM_OK = 0) and takes a
 *   `gm_error* err` as its last argument. err may be NULL; when it is not, it receives the status
 *   and a NUL-terminated UTF-8 message (an empty message on success). No call throws a C++
 *   exception, aborts or exits across this boundary; out-of-memory is reported as
 *   GM_ERROR_OUT_OF_MEMORY. Outputs are written only on success (a failed *_create leaves *handle
 *   NULL).
 *
 * Buffers.  The caller owns every buffer. Copy calls take the output buffer first, then its
 *   capacity in elements of the buffer's type (not bytes), and write exactly the count documented
 *   for the call. The count calls (*_info and the component table of gm_vertex_data) are the
 *   bound helpers: size the buffer from them before the copy. A capacity smaller than the count
 *   fails with GM_ERROR_BUFFER_TOO_SMALL and writes nothing; a larger one is fine (the rest is left
 *   untouched). dst may be NULL only when the count is 0.
 *
 * Units and frame.  Metres; right-handed, Y up, planet centre at the origin (the glTF frame);
 *   directions are unit vectors; positions, directions, normals and morph targets are float64
 *   x, y, z triples; indices are uint32; triangles are counter-clockwise seen from outside.
 *
 * Thread safety.  Stated per call. In short: gm_world and gm_bake are immutable once created, so
 *   every call that takes them as const may run on any number of threads at once, including
 *   several gm_bake_create calls on one world. *_destroy must not run while another call uses the
 *   same handle. Baking uses its own worker threads (gm_bake_options.threads).
 *
 * Same results as Python.  The spec loader reads the rule table globemill.spec is built from
 *   (src/globemill/spec_rules.json: field names, ranges, defaults, deprecation messages), and its
 *   problem lines `path: what (allowed: range), got value` name the same paths and allowed ranges
 *   (numbers written in their shortest exact form, laid out as Python's repr lays them out;
 *   the values may still differ where Python reads a number exactly that float64 cannot hold,
 *   e.g. an integer beyond 2^53), and
 *   gm_world_warnings gives Python's deprecation messages word for word; gm_bake_create runs the
 *   same core calls with the same defaults as globemill.bake(), so counts, vertex positions,
 *   indices, morph targets, normals and colliders equal the Python API's for the same spec and
 *   options. Attributes (slope, altitude, layer, color) follow globemill.attributes.
 *
 * Live editing.  A gm_edit session keeps a world's meshes and re-meshes, on gm_edit_update, only
 *   what the changed features touch; the result equals a fresh gm_bake_create of the new world,
 *   array for array, and gm_edit_changed lists the chunks whose arrays changed (see the end of
 *   this header).
 *
 * Versioning.  GM_VERSION is the version of this header, gm_version() that of the library loaded
 *   at run time; hosts should check that their major versions agree. Structs that may grow carry a
 *   struct_size member set by their *_init call; they grow only at their end. A *_init call fills
 *   the whole struct as this library's header declares it, so declare the struct from the header
 *   shipped with the library you load (a shorter struct filled by hand with its own struct_size
 *   is read up to that size, the rest taking the defaults).
 * ---------------------------------------------------------------------------------------------
 */
#ifndef GLOBEMILL_H
#define GLOBEMILL_H

#include <stddef.h>
#include <stdint.h>

#define GM_VERSION_MAJOR 0
#define GM_VERSION_MINOR 1
#define GM_VERSION_PATCH 0
/* major * 10000 + minor * 100 + patch */
#define GM_VERSION (GM_VERSION_MAJOR * 10000 + GM_VERSION_MINOR * 100 + GM_VERSION_PATCH)
#define GM_VERSION_STRING "0.1.0"

#if defined(GLOBEMILL_STATIC)
#define GM_API /* compiled into the host */
#elif defined(_WIN32)
#if defined(GLOBEMILL_BUILDING_LIBRARY)
#define GM_API __declspec(dllexport)
#else
#define GM_API __declspec(dllimport)
#endif
#elif defined(__GNUC__)
#define GM_API __attribute__((visibility("default")))
#else
#define GM_API
#endif

#ifdef __cplusplus
extern "C" {
#endif

/* ---------------------------------------------------------------------------------------------
 * status codes and errors
 */

typedef enum gm_status {
    GM_OK = 0,
    GM_ERROR_INVALID_ARGUMENT = 1,  /* a NULL handle or pointer, an index out of range, a bad option */
    GM_ERROR_PARSE = 2,             /* the spec text is not well-formed JSON, or passes the limits */
    GM_ERROR_SPEC = 3,              /* well-formed JSON that is not a valid world spec */
    GM_ERROR_BUDGET = 4,            /* the tolerance needs more triangles than max_triangles */
    GM_ERROR_BUFFER_TOO_SMALL = 5,  /* an output capacity below the count the call writes */
    GM_ERROR_OUT_OF_MEMORY = 6,
    GM_ERROR_INTERNAL = 7,          /* a broken invariant inside the core (please report it) */
    GM_ERROR_TOLERANCE = 8          /* a level or the collider measured beyond its tolerance (the
                                     * mesher's size floor); set options.accept_over_tolerance to
                                     * keep such a bake */
} gm_status;

#define GM_ERROR_MESSAGE_SIZE 1024

/* A failure's status and message. message is NUL-terminated UTF-8; a longer message is cut at a
 * character boundary and `truncated` is set (gm_spec_check gives a spec's full problem list). */
typedef struct gm_error {
    int32_t status;    /* a gm_status */
    int32_t truncated; /* 1 when the message was cut to fit */
    char message[GM_ERROR_MESSAGE_SIZE];
} gm_error;

/* Limits of the JSON reader; passing one fails with GM_ERROR_PARSE. */
#define GM_SPEC_MAX_BYTES (8u * 1024u * 1024u) /* length of the spec text */
#define GM_SPEC_MAX_DEPTH 64                   /* nesting of arrays and objects */
#define GM_SPEC_MAX_VALUES 1000000u            /* values (numbers, strings, ... ) in the text */
/* At most this many problem lines are listed for one invalid spec; a last line counts the rest. */
#define GM_SPEC_MAX_PROBLEMS 1000u

/* The version of the library loaded at run time: GM_VERSION of the header it was built from.
 * Thread-safe. */
GM_API uint32_t gm_version(void);

/* The same as "major.minor.patch"; a static string, never freed. Thread-safe. */
GM_API const char* gm_version_string(void);

/* A short English name of a status ("ok", "invalid argument", ...); a static string, never freed,
 * "unknown status" for a value outside gm_status. Thread-safe. */
GM_API const char* gm_status_name(int32_t status);

/* ---------------------------------------------------------------------------------------------
 * world specs
 *
 * The spec is the JSON form of a globemill world spec (docs/terrain.md has every formula;
 * globemill.json_schema() in Python prints the schema). The text must be UTF-8 JSON (RFC 8259)
 * with one object at the top. The reader is strict: no comments, no trailing commas, no NaN or
 * Infinity literals, no duplicate keys, no byte order mark, no lone UTF-16 surrogates in \u
 * escapes. Numbers are read as float64 (an integer-valued literal without fraction or exponent
 * counts as an integer where the spec asks for one); a literal too large for float64 reads as
 * infinity and is then refused by the validator.
 */

/* Validate a spec without creating a world and write its full message.
 *
 * message: room for message_capacity bytes; receives the NUL-terminated message ("" for a valid
 *   spec), cut at a character boundary when it does not fit. May be NULL when message_capacity
 *   is 0.
 * message_length: if not NULL, receives the full message's length in bytes without the NUL (so a
 *   caller can retry with message_length + 1 bytes).
 * spec_json, spec_length: the spec text (not necessarily NUL-terminated).
 * Returns GM_OK for a valid spec, GM_ERROR_PARSE or GM_ERROR_SPEC (message: every problem, one
 * per line, up to GM_SPEC_MAX_PROBLEMS), GM_ERROR_INVALID_ARGUMENT for NULL text.
 * Thread-safe. */
GM_API gm_status gm_spec_check(char* message, size_t message_capacity, size_t* message_length,
                               const char* spec_json, size_t spec_length);

/* ---------------------------------------------------------------------------------------------
 * worlds
 */

typedef struct gm_world gm_world;

/* Read and validate a spec and build its terrain field.
 *
 * world: receives the new handle (NULL on failure).
 * spec_json, spec_length: the spec text (need not be NUL-terminated).
 * Fails with GM_ERROR_PARSE (message: "cannot read world spec: malformed JSON at line L, column
 * C: ..."), GM_ERROR_SPEC (message: "invalid world spec: <problem>" or "invalid world spec (N
 * problems):" followed by one "  - <problem>" line each, the same lines as Python's SpecError),
 * GM_ERROR_INVALID_ARGUMENT, GM_ERROR_OUT_OF_MEMORY.
 * Thread-safe (independent calls). */
GM_API gm_status gm_world_create(gm_world** world, const char* spec_json, size_t spec_length,
                                 gm_error* err);

/* Release a world; NULL is ignored. Not while another call uses it. */
GM_API void gm_world_destroy(gm_world* world);

/* The deprecation messages of a world's spec: one line for each key it gave in a spelling that
 * was renamed (docs/spec.md, "Renamed keys": wall_m, corner_m, heading_deg), which this release
 * still reads and the next will not. The lines are worded by the rule table
 * (src/globemill/spec_rules.json, renamed_messages) and are the messages of Python's
 * SpecDeprecationWarning for the same spec without their leading "<source>: ", e.g.
 *   features[1] ("Pen"): corner_m is deprecated and will not be read after this release; write
 *   corner_radius_m instead
 * (one line; a feature without a name is just features[i]).
 *
 * text: room for text_capacity bytes; receives the lines, in spec order, separated by '\n' with
 *   no '\n' after the last, NUL-terminated ("" when the spec uses no old key); cut at a character
 *   boundary when they do not fit (as gm_spec_check's message). May be NULL when text_capacity
 *   is 0: then nothing is written but *text_length (the size query).
 * text_length: if not NULL, receives the full text's length in bytes without the NUL (so a
 *   caller can retry with text_length + 1 bytes; text_length < text_capacity means nothing was
 *   cut).
 * Fails with GM_ERROR_INVALID_ARGUMENT (a NULL world, or a NULL text with a capacity above 0),
 * writing nothing. Thread-safe. */
GM_API gm_status gm_world_warnings(char* text, size_t text_capacity, size_t* text_length,
                                   const gm_world* world, gm_error* err);

typedef struct gm_world_info {
    double radius_m;              /* base radius R */
    double tolerance_m;           /* the spec's tolerance */
    double ratio;                 /* lod.ratio: tolerance of level k is tolerance_m * ratio^k */
    double skirt_depth_m;         /* lod.skirt_depth_m as given (0: twice the coarsest tolerance) */
    double collision_tolerance_m; /* collision.tolerance_m, or 4 * tolerance_m when not given
                                     (a bake with options.tolerance_m uses 4 * that) */
    uint64_t max_triangles;       /* triangle budget */
    uint32_t feature_count;
    uint32_t layer_count;         /* at most 255 */
    uint32_t levels;              /* lod.levels */
    uint32_t chunk_level;         /* lod.chunk_level: 20 * 4^chunk_level chunks */
    uint32_t chunk_count;         /* 20 * 4^chunk_level */
    uint32_t collision_max_triangles_per_chunk;
    int32_t offset;               /* 0 radial, 1 normal, 2 exact */
    int32_t seams;                /* 0 stitch, 1 skirt */
    int32_t collision_bias;       /* 0 none, 1 centered */
    int32_t reserved;
    char name[72];                /* the spec's name, NUL-terminated ASCII ([A-Za-z0-9_-]{1,64}) */
} gm_world_info;

/* The spec's settings after defaults. Thread-safe. */
GM_API gm_status gm_world_get_info(gm_world_info* info, const gm_world* world, gm_error* err);

/* The feature table the core evaluates: 16 float64 per feature, in spec order, exactly as
 * Python's WorldSpec.core_features(). Columns: 0 kind code (hill 0, mesa 1, block 2, crater 3,
 * ridge 4, noise 5), 1 blend code (add 0, max 1, min 2, set 3, smooth_max 4, smooth_min 5),
 * 2 blend width (0 unless smooth), 3..5 centre unit vector (ridge: first end; noise: 0),
 * 6..8 ridge second end (else 0), 9.. kind parameters (see globemill/spec.py core_features).
 * dst: room for 16 * feature_count doubles. Thread-safe. */
GM_API gm_status gm_world_features(double* dst, size_t dst_capacity, const gm_world* world,
                                   gm_error* err);

/* Height H(u) in metres above radius_m at `count` directions (3 float64 each; each is normalised,
 * a zero or non-finite one fails with GM_ERROR_INVALID_ARGUMENT).
 * heights: room for count doubles. Thread-safe. Runs on the calling thread. */
GM_API gm_status gm_world_height(double* heights, size_t heights_capacity, const gm_world* world,
                                 const double* directions, size_t count, gm_error* err);

/* Gradient of H (tangent, metres per radian; docs/terrain.md "Gradient") at `count` directions.
 * gradients: room for 3 * count doubles. Thread-safe. Runs on the calling thread. */
GM_API gm_status gm_world_gradient(double* gradients, size_t gradients_capacity,
                                   const gm_world* world, const double* directions, size_t count,
                                   gm_error* err);

/* ---------------------------------------------------------------------------------------------
 * baking
 */

typedef struct gm_bake gm_bake;

/* Called between refinement rounds on the thread that called gm_bake_create:
 * (user, round, leaf triangles so far). It must not call gm_bake_destroy on the bake in flight. */
typedef void (*gm_progress_fn)(void* user, int32_t round, uint64_t triangles);

/* Options of one bake. Initialise with gm_bake_options_init, then change what you need; a zero
 * (or -1 where stated) means "the spec's value", exactly like the keyword arguments of Python's
 * globemill.bake(). */
typedef struct gm_bake_options {
    uint32_t struct_size;    /* sizeof(gm_bake_options); set by gm_bake_options_init */
    int32_t threads;         /* worker threads, 0..1024; 0: all hardware threads */
    double tolerance_m;      /* finest level's tolerance; 0: the spec's tolerance_m */
    double ratio;            /* tolerance ratio between levels, in (1, 16]; 0: lod.ratio */
    int32_t levels;          /* 1..12; 0: lod.levels */
    int32_t chunk_level;     /* 0..5; -1: lod.chunk_level */
    int32_t offset;          /* 0 radial, 1 normal, 2 exact; -1: the spec's offset */
    int32_t collision;       /* 1: bake colliders (default), 0: skip them */
    uint64_t max_triangles;  /* triangle budget; 0: the spec's max_triangles */
    gm_progress_fn progress; /* may be NULL */
    void* progress_user;     /* passed to progress */
    int32_t accept_over_tolerance; /* 1: keep a bake measured beyond a tolerance; 0 (default):
                                    * it fails with GM_ERROR_TOLERANCE */
} gm_bake_options;

/* Fill options with the defaults (every value from the spec, all threads, colliders on).
 * Thread-safe. */
GM_API void gm_bake_options_init(gm_bake_options* options);

/* Bake a world: build the bisection hierarchy down to the finest tolerance needed, extract every
 * level of detail (tolerance_m * ratio^k, k = 0 .. levels-1, level 0 finest), split them into
 * 20 * 4^chunk_level chunks with stitched seam variants (or skirts when the spec's lod.seams is
 * "skirt"), morph targets, analytic normals and attributes, and one collider per chunk.
 *
 * Colliders follow the spec's `collision` section exactly as Python's bake: meshed at
 * collision.tolerance_m (default 4 * the finest level's tolerance), the tolerance raised by 1.25x until
 * every chunk fits max_triangles_per_chunk, and with bias "centered" the vertices moved radially
 * by the same arithmetic as Python's bake (so the collider straddles the true surface).
 *
 * bake: receives the new handle (NULL on failure). options: NULL for the defaults.
 * Fails with GM_ERROR_INVALID_ARGUMENT (a bad option; the message names it and its range, as
 * Python's ValueError does), GM_ERROR_BUDGET (more than max_triangles would be needed),
 * GM_ERROR_OUT_OF_MEMORY, GM_ERROR_INTERNAL.
 * Thread-safe: several bakes of one world may run at once. Blocks until done. */
GM_API gm_status gm_bake_create(gm_bake** bake, const gm_world* world,
                                const gm_bake_options* options, gm_error* err);

/* Release a bake; NULL is ignored. Not while another call uses it. */
GM_API void gm_bake_destroy(gm_bake* bake);

typedef struct gm_bake_info {
    uint64_t vertex_count;          /* the shared vertex pool (every level's vertices) */
    uint32_t level_count;
    uint32_t chunk_count;
    int32_t seams;                  /* 0 stitch, 1 skirt */
    int32_t has_colliders;          /* 0 when baked with options.collision = 0 */
    double skirt_depth_m;           /* skirt depth used (0 when stitched) */
    double collision_tolerance_m;   /* the tolerance colliders were meshed at (after raising) */
    double collision_max_error_m;   /* measured two-sided deviation of the colliders */
    uint64_t collision_triangles;   /* over all chunks */
    uint64_t collision_max_triangles_per_chunk;
} gm_bake_info;

/* Counts of a bake. Thread-safe. */
GM_API gm_status gm_bake_get_info(gm_bake_info* info, const gm_bake* bake, gm_error* err);

typedef struct gm_level_info {
    double tolerance_m;
    double max_error_m;        /* measured a posteriori, both ways */
    double mesh_to_surface_m;
    double surface_to_mesh_m;
    uint64_t vertex_count;     /* vertices of the pool this level uses */
    uint64_t triangle_count;
    uint64_t repaired;         /* triangles split because verification found them too far */
    uint64_t stitch_failures;  /* stitched variants left unstitched (expected 0) */
} gm_level_info;

/* Counts and measured errors of one level (0 = finest). Thread-safe. */
GM_API gm_status gm_bake_level_info(gm_level_info* info, const gm_bake* bake, uint32_t level,
                                    gm_error* err);

/* Per-vertex data, float64. The component count of each is in the comment. */
typedef enum gm_vertex_data {
    GM_VERTEX_POSITION = 0,  /* 3: metres */
    GM_VERTEX_DIRECTION = 1, /* 3: unit direction from the centre */
    GM_VERTEX_NORMAL = 2,    /* 3: analytic unit normal of the true surface */
    GM_VERTEX_MORPH = 3,     /* 3: position on the next coarser level (chunk calls only) */
    GM_VERTEX_SLOPE = 4,     /* 1: degrees, atan(|grad H| / (R + H)) */
    GM_VERTEX_ALTITUDE = 5,  /* 1: H, metres above radius_m */
    GM_VERTEX_COLOR = 6      /* 3: linear RGB of the vertex's layer (0.5 grey for no layer) */
} gm_vertex_data;

/* Components per vertex of `which` (3 or 1), 0 for a value outside gm_vertex_data. Thread-safe. */
GM_API uint32_t gm_vertex_data_components(int32_t which);

/* Layer index of a vertex that no layer rule matches. */
#define GM_NO_LAYER 255

/* The shared vertex pool's data (GM_VERTEX_MORPH is per level: use gm_bake_level_morph).
 * dst: room for components * vertex_count doubles. GM_VERTEX_COLOR fails with
 * GM_ERROR_INVALID_ARGUMENT when the spec has more than 255 layer rules. Thread-safe. */
GM_API gm_status gm_bake_vertex_data(double* dst, size_t dst_capacity, const gm_bake* bake,
                                     int32_t which, gm_error* err);

/* Material layer per pool vertex: the index of the first layer rule whose slope and altitude
 * bands hold it, or GM_NO_LAYER. dst: room for vertex_count bytes. Fails with
 * GM_ERROR_INVALID_ARGUMENT when the spec has more than 255 layer rules. Thread-safe. */
GM_API gm_status gm_bake_vertex_layers(uint8_t* dst, size_t dst_capacity, const gm_bake* bake,
                                       gm_error* err);

/* A level's triangles as pool vertex ids, grouped by chunk (ascending), each chunk's interior
 * triangles first. dst: room for 3 * triangle_count uint32. Thread-safe. */
GM_API gm_status gm_bake_level_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* bake,
                                         uint32_t level, gm_error* err);

/* The chunk of each of a level's triangles. dst: room for triangle_count uint32. Thread-safe. */
GM_API gm_status gm_bake_level_triangle_chunks(uint32_t* dst, size_t dst_capacity,
                                               const gm_bake* bake, uint32_t level,
                                               gm_error* err);

/* Measured deviation (m) of each of a level's triangles. dst: room for triangle_count float.
 * Thread-safe. */
GM_API gm_status gm_bake_level_errors(float* dst, size_t dst_capacity, const gm_bake* bake,
                                      uint32_t level, gm_error* err);

/* Every pool vertex's position on the next coarser level (its own on the coarsest level).
 * dst: room for 3 * vertex_count doubles (vertex_count of gm_bake_info). Thread-safe. */
GM_API gm_status gm_bake_level_morph(double* dst, size_t dst_capacity, const gm_bake* bake,
                                     uint32_t level, gm_error* err);

/* 1 for each pool vertex the level uses, else 0. dst: room for vertex_count bytes. Thread-safe. */
GM_API gm_status gm_bake_level_present(uint8_t* dst, size_t dst_capacity, const gm_bake* bake,
                                       uint32_t level, gm_error* err);

/* ---------------------------------------------------------------------------------------------
 * chunks: one level of one chunk as a mesh of its own (what an engine streams and draws)
 *
 * A chunk's vertices are its pool vertices in ascending pool id (then, with skirts, one lowered
 * copy of each boundary vertex); its triangles index them locally. Edge i of a chunk is the one
 * opposite corner i. Seams: draw the chunk's interior triangles (the first interior_count) and
 * either its own border (the rest) or, when the neighbours across the edges in `mask` (bit i:
 * edge i) are drawn one level coarser, the stitched border of that mask instead. The result has
 * no crack and no T-junction. Masks 1..7 exist on every level but the coarsest (whose stitched
 * counts are 0, as are all of them with skirts).
 */

typedef struct gm_chunk_info {
    uint64_t vertex_count;               /* surface + skirt vertices */
    uint64_t surface_vertex_count;       /* pool vertices of the chunk (the first ones) */
    uint64_t triangle_count;             /* interior + border */
    uint64_t interior_count;             /* the first interior_count triangles */
    uint64_t skirt_triangle_count;       /* 0 unless seams are skirts */
    uint64_t stitched_triangle_count[8]; /* border triangles per edge mask; [0] is 0 */
    uint32_t neighbors[3];               /* chunk across edge i */
    uint32_t corners[3];                 /* pool vertex id of corner i */
} gm_chunk_info;

/* Counts of one chunk on one level. Thread-safe. */
GM_API gm_status gm_chunk_get_info(gm_chunk_info* info, const gm_bake* bake, uint32_t level,
                                   uint32_t chunk, gm_error* err);

/* Pool vertex id of each surface vertex of the chunk (ascending).
 * dst: room for surface_vertex_count uint32. Thread-safe. */
GM_API gm_status gm_chunk_vertex_ids(uint32_t* dst, size_t dst_capacity, const gm_bake* bake,
                                     uint32_t level, uint32_t chunk, gm_error* err);

/* Per-vertex data of the chunk's vertices, skirt vertices included: a skirt vertex has the
 * position and morph target of its boundary vertex lowered by the skirt depth and that vertex's
 * other data. dst: room for components * vertex_count doubles. Thread-safe. */
GM_API gm_status gm_chunk_vertex_data(double* dst, size_t dst_capacity, const gm_bake* bake,
                                      uint32_t level, uint32_t chunk, int32_t which,
                                      gm_error* err);

/* Layer per chunk vertex (skirt vertices included). dst: room for vertex_count bytes.
 * Thread-safe. */
GM_API gm_status gm_chunk_vertex_layers(uint8_t* dst, size_t dst_capacity, const gm_bake* bake,
                                        uint32_t level, uint32_t chunk, gm_error* err);

/* The chunk's triangles, local indices, interior first. dst: room for 3 * triangle_count uint32.
 * Thread-safe. */
GM_API gm_status gm_chunk_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* bake,
                                    uint32_t level, uint32_t chunk, gm_error* err);

/* The stitched border for edge mask 1..7, local indices.
 * dst: room for 3 * stitched_triangle_count[mask] uint32. Thread-safe. */
GM_API gm_status gm_chunk_stitched(uint32_t* dst, size_t dst_capacity, const gm_bake* bake,
                                   uint32_t level, uint32_t chunk, uint32_t mask, gm_error* err);

/* Skirt triangles (seams "skirt"), local indices into the chunk's vertices.
 * dst: room for 3 * skirt_triangle_count uint32. Thread-safe. */
GM_API gm_status gm_chunk_skirt(uint32_t* dst, size_t dst_capacity, const gm_bake* bake,
                                uint32_t level, uint32_t chunk, gm_error* err);

/* ---------------------------------------------------------------------------------------------
 * colliders: one collision mesh per chunk (fails with GM_ERROR_INVALID_ARGUMENT when the bake
 * was made with options.collision = 0)
 */

/* Vertex and triangle counts of a chunk's collider. Either pointer may be NULL. Thread-safe. */
GM_API gm_status gm_collider_counts(uint64_t* vertex_count, uint64_t* triangle_count,
                                    const gm_bake* bake, uint32_t chunk, gm_error* err);

/* Collider vertex positions (metres), ascending pool id. dst: room for 3 * vertex_count doubles.
 * Thread-safe. */
GM_API gm_status gm_collider_positions(double* dst, size_t dst_capacity, const gm_bake* bake,
                                       uint32_t chunk, gm_error* err);

/* Collider triangles, local indices. dst: room for 3 * triangle_count uint32. Thread-safe. */
GM_API gm_status gm_collider_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* bake,
                                       uint32_t chunk, gm_error* err);

/* ---------------------------------------------------------------------------------------------
 * LIVE EDITING
 *
 * An edit session bakes a world once and keeps, besides the meshes, what an incremental re-mesh
 * needs. gm_edit_update takes the edited world (a gm_world made from the edited spec JSON: the
 * host edits the spec, e.g. moves a feature's lat_deg/lon_deg, and calls gm_world_create); only
 * the tests and measurements near the features that differ are redone, and the result is, array
 * for array and bit for bit, what gm_bake_create makes of the edited world with the session's
 * options (the same contract as Python's globemill.EditSession).
 */
typedef struct gm_edit gm_edit;

/* Level number that marks a collider in gm_edit_changed's pairs. */
#define GM_COLLIDER_LEVEL 0xFFFFFFFFu

/* Bake `world` with `options` (NULL: defaults; progress is called during this first bake only)
 * and keep it for editing. Fails as gm_bake_create does. The world may be destroyed afterwards.
 * Thread-safe as gm_bake_create. */
GM_API gm_status gm_edit_create(gm_edit** edit, const gm_world* world,
                                const gm_bake_options* options, gm_error* err);

/* Release a session; NULL is ignored. Not while another call uses it (or its gm_edit_bake). */
GM_API void gm_edit_destroy(gm_edit* edit);

/* Re-mesh for `world`, which may differ from the session's current spec only in its features,
 * layers and name (anything else fails with GM_ERROR_INVALID_ARGUMENT naming the rule). The
 * features are compared with the current ones (gm_world_features): the rows outside the longest
 * runs the two lists share at their start and end (one changed, inserted or removed feature)
 * re-mesh around their old and new footprints. Fails as gm_bake_create does (e.g. GM_ERROR_BUDGET); on failure the session, its bake
 * and its changed list stay exactly as they were. The bake handle from gm_edit_bake taken before
 * a successful update is released by it. Calls on one session serialise on its lock (two threads
 * updating at once run one after the other); no reader of its bake while an update runs. */
GM_API gm_status gm_edit_update(gm_edit* edit, const gm_world* world, gm_error* err);

/* The session's current meshes, to read with every gm_bake_* / gm_chunk_* / gm_collider_* call
 * (NULL when edit is NULL). Owned by the session: valid until the next successful
 * gm_edit_update or gm_edit_destroy. */
GM_API const gm_bake* gm_edit_bake(const gm_edit* edit);

/* Number of (level, chunk) pairs the last gm_edit_update changed (0 after gm_edit_create).
 * Thread-safe with other readers. */
GM_API gm_status gm_edit_changed_count(uint64_t* count, const gm_edit* edit, gm_error* err);

/* The pairs themselves, 2 * count uint32: level then chunk, by level then chunk ascending; a
 * chunk is listed when any of its arrays (vertex data, attributes, morph targets, triangles,
 * stitched variants, skirt) differs from before. Colliders that changed follow as
 * (GM_COLLIDER_LEVEL, chunk). Upload exactly these. Thread-safe with other readers. */
GM_API gm_status gm_edit_changed(uint32_t* dst, size_t dst_capacity, const gm_edit* edit,
                                 gm_error* err);

#ifdef __cplusplus
} /* extern "C" */
#endif

#endif /* GLOBEMILL_H */
