// pybind11 glue for globemill._core: arrays in and out, GIL released around core work.
// float64 positions and directions, uint32 triangle indices.
#include <pybind11/functional.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <cmath>
#include <memory>
#include <optional>
#include <stdexcept>
#include <string>
#include <vector>

#include "field.hpp"
#include "lod.hpp"
#include "measure.hpp"
#include "attributes.hpp"
#include "bake.hpp"
#include "cache_order.hpp"
#include "cache_stats.hpp"
#include "fetch_order.hpp"
#include "refine.hpp"
#include "session.hpp"
#include "tight.hpp"

namespace py = pybind11;
using namespace gm;

namespace {

using Doubles = py::array_t<double, py::array::c_style | py::array::forcecast>;
using Indices = py::array_t<std::uint32_t, py::array::c_style | py::array::forcecast>;

// hand a std::vector to numpy without copying: the capsule owns it
template <class T>
py::array_t<T> to_numpy(std::vector<T>&& v, std::vector<py::ssize_t> shape) {
    auto* heap = new std::vector<T>(std::move(v));
    py::capsule owner(heap, [](void* p) { delete static_cast<std::vector<T>*>(p); });
    return py::array_t<T>(shape, heap->data(), owner);
}

// a bake that could not be done (budget, tolerance missed): globemill.BakeError, a ValueError
struct BakeFailure : std::runtime_error {
    using std::runtime_error::runtime_error;
};

void raise_status(Status s, const std::string& msg) {
    switch (s) {
        case Status::Ok:
            return;
        case Status::InvalidArgument:
        case Status::NonFinite:
            throw py::value_error(msg);
        case Status::BudgetExceeded:
        case Status::ToleranceMissed:
            throw BakeFailure(msg);
        default:
            throw std::runtime_error(msg);
    }
}

const double* rows3(const Doubles& a, const char* what) {
    if (a.ndim() != 2 || a.shape(1) != 3)
        throw py::value_error(std::string(what) + " must have shape (N, 3), got ndim=" +
                              std::to_string(a.ndim()));
    return a.data();
}

// unit directions from the caller's rows; zero or non-finite rows are refused
std::vector<Vec3> directions(const Doubles& a) {
    const double* d = rows3(a, "directions");
    std::size_t n = static_cast<std::size_t>(a.shape(0));
    std::vector<Vec3> out(n);
    for (std::size_t i = 0; i < n; ++i) {
        Vec3 v{d[3 * i], d[3 * i + 1], d[3 * i + 2]};
        double l = norm(v);
        if (!std::isfinite(l) || !(l > 0))
            throw py::value_error("directions[" + std::to_string(i) +
                                  "] must be a finite non-zero vector");
        out[i] = (1.0 / l) * v;
    }
    return out;
}

class PyField {
public:
    PyField(double radius, const Doubles& features) {
        if (features.ndim() != 2 || features.shape(1) != kFeatureColumns)
            throw py::value_error("features must have shape (n, 16)");
        std::string err;
        Status s = field_.init(radius, features.data(), static_cast<std::size_t>(features.shape(0)), err);
        raise_status(s, err);
    }
    const Field& field() const { return field_; }
    double radius() const { return field_.radius(); }

    py::array_t<double> height(const Doubles& dirs) const {
        std::vector<Vec3> u = directions(dirs);
        std::vector<double> h(u.size());
        {
            py::gil_scoped_release nogil;
            parallel_for(u.size(), 0, [&](std::size_t b, std::size_t e) {
                for (std::size_t i = b; i < e; ++i) h[i] = field_.eval(u[i], nullptr);
            });
        }
        return to_numpy(std::move(h), {static_cast<py::ssize_t>(u.size())});
    }

    py::array_t<double> gradient(const Doubles& dirs) const {
        std::vector<Vec3> u = directions(dirs);
        std::vector<double> g(u.size() * 3);
        {
            py::gil_scoped_release nogil;
            parallel_for(u.size(), 0, [&](std::size_t b, std::size_t e) {
                for (std::size_t i = b; i < e; ++i) {
                    Vec3 v;
                    field_.eval(u[i], &v);
                    g[3 * i] = v.x;
                    g[3 * i + 1] = v.y;
                    g[3 * i + 2] = v.z;
                }
            });
        }
        return to_numpy(std::move(g), {static_cast<py::ssize_t>(u.size()), 3});
    }

    py::array_t<double> wall_distance(const Doubles& points) const {
        const double* p = rows3(points, "points");
        std::size_t n = static_cast<std::size_t>(points.shape(0));
        std::vector<double> out(n);
        {
            py::gil_scoped_release nogil;
            for (std::size_t i = 0; i < n; ++i) {
                Vec3 q{p[3 * i], p[3 * i + 1], p[3 * i + 2]};
                out[i] = field_.wall_distance(q);
            }
        }
        return to_numpy(std::move(out), {static_cast<py::ssize_t>(n)});
    }

private:
    Field field_;
};

py::dict stats_dict(const RefineStats& stats) {
    py::dict st;
    st["estimate"] = stats.estimate;
    st["tested"] = stats.tested;
    st["rounds"] = stats.rounds;
    st["max_level"] = stats.max_level;
    st["repaired"] = stats.repaired;
    st["reused"] = stats.reused;
    st["refine_seconds"] = stats.refine_seconds;
    st["verify_seconds"] = stats.verify_seconds;
    st["verify_points"] = stats.verify_points;
    return st;
}


// layer rules from an (n, 7) array: slope lo, hi, altitude lo, hi, color r, g, b
std::vector<LayerRule> layers_from(const py::object& o) {
    Doubles a = py::cast<Doubles>(o);
    if (a.size() == 0) return {};
    if (a.ndim() != 2 || a.shape(1) != 7) throw py::value_error("layers must have shape (n, 7)");
    std::vector<LayerRule> out(static_cast<std::size_t>(a.shape(0)));
    const double* p = a.data();
    for (std::size_t i = 0; i < out.size(); ++i, p += 7) {
        out[i].slope_deg[0] = p[0], out[i].slope_deg[1] = p[1];
        out[i].altitude_m[0] = p[2], out[i].altitude_m[1] = p[3];
        for (int k = 0; k < 3; ++k) out[i].color[k] = p[4 + k];
    }
    return out;
}

// ---------------------------------------------------------------------------------------------
// the bake result as numpy views: every array is a read-only view of the core's own buffer, kept
// alive by a capsule that shares ownership of the result (or of the chunk) it belongs to

template <class T>
py::array view(const std::vector<T>& v, std::vector<py::ssize_t> shape, py::handle owner) {
    py::array_t<T> a(shape, v.data(), owner);
    py::detail::array_proxy(a.ptr())->flags &= ~py::detail::npy_api::NPY_ARRAY_WRITEABLE_;
    return std::move(a);
}

template <class T>
py::capsule owner_of(std::shared_ptr<const T> p) {
    auto* heap = new std::shared_ptr<const T>(std::move(p));
    return py::capsule(heap, [](void* q) { delete static_cast<std::shared_ptr<const T>*>(q); });
}

py::ssize_t ss(std::size_t n) { return static_cast<py::ssize_t>(n); }

BakeSettings settings_from(const py::dict& d) {
    BakeSettings s;
    auto get = [&](const char* k) -> py::object {
        if (!d.contains(k)) throw py::value_error(std::string("settings: missing '") + k + "'");
        return d[k];
    };
    s.radius_m = get("radius_m").cast<double>();
    s.tolerance_m = get("tolerance_m").cast<double>();
    s.offset = get("offset").cast<int>();
    s.levels = get("levels").cast<int>();
    s.ratio = get("ratio").cast<double>();
    s.chunk_level = get("chunk_level").cast<int>();
    s.max_triangles = get("max_triangles").cast<std::uint64_t>();
    s.stitch = get("stitch").cast<bool>();
    s.skirt_depth_m = get("skirt_depth_m").cast<double>();
    s.collision = get("collision").cast<bool>();
    s.collision_tolerance_m = get("collision_tolerance_m").cast<double>();
    s.collision_centered = get("collision_centered").cast<bool>();
    s.collider_cap = get("collider_cap").cast<std::uint64_t>();
    // optional: the collider angle pass's target (benchmarks switch it off to compare)
    if (d.contains("collider_min_angle_deg")) s.collider_min_angle_deg = d["collider_min_angle_deg"].cast<double>();
    s.threads = get("threads").cast<int>();
    s.accept_over_tolerance = get("accept_over_tolerance").cast<bool>();
    s.layers = layers_from(get("layers"));
    return s;
}

py::dict chunk_dict(const std::shared_ptr<const ChunkMesh>& m) {
    py::capsule own = owner_of(m);
    const ChunkMesh& c = *m;
    const py::ssize_t n = ss(c.vertex_count());
    py::dict d;
    d["surface_vertices"] = c.surface_vertices;
    d["positions"] = view(c.positions, {n, 3}, own);
    d["normals"] = view(c.normals, {n, 3}, own);
    d["morph"] = view(c.morph, {n, 3}, own);
    d["slope_deg"] = view(c.slope_deg, {n}, own);
    d["altitude_m"] = view(c.altitude_m, {n}, own);
    d["layer"] = view(c.layer, {n}, own);
    d["color"] = view(c.color, {n, 3}, own);
    d["triangles"] = view(c.triangles, {ss(c.triangles.size() / 3), 3}, own);
    d["interior"] = c.interior;
    d["stitched"] = view(c.stitched, {ss(c.stitched.size() / 3), 3}, own);
    std::vector<std::uint64_t> off(c.stitch_offsets, c.stitch_offsets + 9);
    d["stitch_offsets"] = off;
    d["skirt"] = view(c.skirt, {ss(c.skirt.size() / 3), 3}, own);
    d["token"] = reinterpret_cast<std::uintptr_t>(m.get());
    return d;
}

// one baked world, shared with the edit session that made it (if any)
class PyBake {
public:
    explicit PyBake(std::shared_ptr<const BakeResult> r) : r_(std::move(r)) {}

    py::dict pool() const {
        py::capsule own = owner_of(r_);
        const BakeResult& r = *r_;
        const py::ssize_t V = ss(r.slope_deg.size());
        py::dict d;
        d["positions"] = view(r.positions, {V, 3}, own);
        d["directions"] = view(r.directions, {V, 3}, own);
        d["normals"] = view(r.normals, {V, 3}, own);
        d["slope_deg"] = view(r.slope_deg, {V}, own);
        d["altitude_m"] = view(r.altitude_m, {V}, own);
        d["layer"] = view(r.layer, {V}, own);
        d["color"] = view(r.color, {V, 3}, own);
        d["parents"] = view(r.vertex_parents, {V, 2}, own);
        const py::ssize_t C = ss(r.chunk_count);
        d["chunk_corners"] = view(r.chunks.corners, {C, 3}, own);
        d["chunk_neighbors"] = view(r.chunks.neighbors, {C, 3}, own);
        d["chunk_edge_ids"] = view(r.chunks.edge_ids, {C, 3}, own);
        return d;
    }

    std::size_t level_count() const { return r_->levels.size(); }
    std::size_t chunk_count() const { return r_->chunk_count; }

    py::dict level(std::size_t k) const {
        if (k >= r_->levels.size()) throw py::index_error("level out of range");
        py::capsule own = owner_of(r_);
        const LevelResult& L = r_->levels[k];
        const Level& lv = L.mesh;
        const py::ssize_t T = ss(lv.chunk.size()), V = ss(lv.present.size()), C = ss(r_->chunk_count);
        py::dict d;
        d["tolerance_m"] = lv.tolerance_m;
        d["triangles"] = view(lv.triangles, {T, 3}, own);
        d["chunk"] = view(lv.chunk, {T}, own);
        d["errors"] = view(lv.errors, {T}, own);
        d["present"] = view(lv.present, {V}, own);
        d["morph"] = view(lv.morph, {V, 3}, own);
        d["interior"] = view(lv.interior, {C}, own);
        d["vertex_offsets"] = view(L.vertex_offsets, {C + 1}, own);
        d["vertex_ids"] = view(L.vertex_ids, {ss(L.vertex_ids.size())}, own);
        d["vertices"] = L.vertex_count;
        d["max_error_m"] = lv.max_error_m;
        d["mesh_to_surface_m"] = lv.mesh_to_surface_m;
        d["surface_to_mesh_m"] = lv.surface_to_mesh_m;
        d["repaired"] = lv.repaired;
        d["stitch_failures"] = lv.stitch_failures;
        d["seconds"] = L.seconds;
        return d;
    }

    py::dict chunk(std::size_t k, std::size_t c) const {
        if (k >= r_->levels.size() || c >= r_->chunk_count) throw py::index_error("level or chunk out of range");
        return chunk_dict(r_->levels[k].chunks[c]);
    }

    py::object colliders() const {
        const ColliderResult& cr = r_->colliders;
        if (!cr.made) return py::none();
        py::dict d;
        d["tolerance_m"] = cr.tolerance_m;
        d["requested_tolerance_m"] = cr.requested_tolerance_m;
        d["triangles"] = cr.triangles;
        d["max_triangles_per_chunk"] = cr.max_triangles_per_chunk;
        d["max_error_m"] = cr.max_error_m;
        d["mesh_to_surface_m"] = cr.mesh_to_surface_m;
        d["surface_to_mesh_m"] = cr.surface_to_mesh_m;
        d["min_angle_deg"] = cr.min_angle_deg;
        d["min_angle_target_deg"] = cr.min_angle_target_deg;
        d["angle_collapses"] = cr.angle_collapses;
        d["angle_flips"] = cr.angle_flips;
        d["angle_inserts"] = cr.angle_inserts;
        d["angle_stuck"] = cr.angle_stuck;
        d["degenerate_triangles"] = cr.degenerate_triangles;
        d["tight_triangles"] = cr.tight_triangles;
        d["seconds"] = cr.seconds;
        py::list chunks;
        for (const auto& c : cr.chunks) {
            py::capsule own = owner_of(c);
            py::dict m;
            m["positions"] = view(c->positions, {ss(c->positions.size() / 3), 3}, own);
            m["triangles"] = view(c->triangles, {ss(c->triangles.size() / 3), 3}, own);
            m["token"] = reinterpret_cast<std::uintptr_t>(c.get());
            chunks.append(m);
        }
        d["chunks"] = chunks;
        return std::move(d);
    }

    py::dict stats() const {
        const BakeResult& r = *r_;
        py::dict st = stats_dict(r.stats);
        py::dict sec;
        sec["refine"] = r.seconds.refine;
        sec["verify"] = r.seconds.verify;
        sec["attributes"] = r.seconds.attributes;
        sec["levels"] = r.seconds.levels;
        sec["colliders"] = r.seconds.colliders;
        sec["total"] = r.seconds.total;
        st["seconds"] = sec;
        py::dict ev;
        auto put = [&ev](const char* k, const EvalTally& t) {
            ev[k] = py::make_tuple(t.points, t.terms);
        };
        put("hierarchy", r.evaluations.hierarchy);
        put("attributes", r.evaluations.attributes);
        put("levels", r.evaluations.levels);
        put("colliders", r.evaluations.colliders);
        put("total", r.evaluations.total);
        st["evaluations"] = ev;
        st["tolerances"] = r.plan.tolerances;
        st["collider_m"] = r.plan.collider_m;
        st["skirt_depth_m"] = r.plan.skirt_depth_m;
        return st;
    }

private:
    std::shared_ptr<const BakeResult> r_;
};

using ProgressFn = std::function<void(std::string, std::uint64_t, std::uint64_t)>;

void attach_progress(BakeSettings& s, ProgressFn& fn) {
    if (!fn) return;
    s.progress = [&fn](const char* stage, std::uint64_t done, std::uint64_t total) {
        py::gil_scoped_acquire gil;
        fn(stage, done, total);
    };
}

using EstimateFn = std::function<void(std::uint64_t)>;

PyBake bake_py(const PyField& f, const py::dict& settings, ProgressFn progress, EstimateFn on_estimate) {
    BakeSettings s = settings_from(settings);
    attach_progress(s, progress);
    // the caller's check of the survey's estimate: an exception it raises stops the bake (no C++
    // frame is unwound by it) and is raised again once the core has returned
    std::unique_ptr<py::error_already_set> raised;
    if (on_estimate)
        s.on_estimate = [&on_estimate, &raised](std::uint64_t estimate) {
            py::gil_scoped_acquire gil;
            try {
                on_estimate(estimate);
                return true;
            } catch (py::error_already_set& e) {
                raised = std::make_unique<py::error_already_set>(std::move(e));
                return false;
            }
        };
    auto r = std::make_shared<BakeResult>();
    std::string err;
    Status st;
    {
        py::gil_scoped_release nogil;
        st = bake(f.field(), s, *r, err);
    }
    if (raised) throw std::move(*raised);
    raise_status(st, err);
    return PyBake(std::move(r));
}

// the core's edit session; every call holds its lock (concurrent calls serialise)
class PyEditSession {
public:
    PyEditSession(const PyField& f, const py::dict& settings) {
        BakeSettings s = settings_from(settings);
        std::string err;
        Status st;
        {
            py::gil_scoped_release nogil;
            st = s_.start(f.field(), s, err);
        }
        raise_status(st, err);
    }
    py::dict update(const PyField& f, const py::object& layers) {
        std::vector<LayerRule> rules = layers_from(layers);
        EditChanges ch;
        std::string err;
        Status st;
        {
            py::gil_scoped_release nogil;
            st = s_.update(f.field(), rules, ch, err);
        }
        raise_status(st, err);
        py::dict d;
        py::list chunks;
        for (const auto& p : ch.chunks) chunks.append(py::make_tuple(p.first, p.second));
        d["chunks"] = chunks;
        d["colliders"] = ch.colliders;
        d["seconds"] = ch.seconds;
        return d;
    }
    PyBake result() const { return PyBake(s_.result()); }

private:
    EditSession s_;
};

// the tight figures of every triangle (tight.cpp), per triangle both ways
py::dict measure_tight_py(const PyField& f, const Doubles& vertices, const Indices& triangles, double spacing_m,
                          int threads) {
    const double* v = rows3(vertices, "vertices");
    if (triangles.ndim() != 2 || triangles.shape(1) != 3)
        throw py::value_error("triangles must have shape (M, 3)");
    if (!(spacing_m >= 0) || !std::isfinite(spacing_m)) throw py::value_error("spacing_m must be finite and >= 0");
    std::size_t nv = static_cast<std::size_t>(vertices.shape(0));
    std::size_t nt = static_cast<std::size_t>(triangles.shape(0));
    const std::uint32_t* t = triangles.data();
    for (std::size_t i = 0; i < nt * 3; ++i)
        if (t[i] >= nv) throw py::value_error("triangles refer to a vertex index >= len(vertices)");
    std::vector<double> m2s(nt), s2m(nt);
    {
        py::gil_scoped_release nogil;
        auto corner = [&](std::size_t k) { return Vec3{v[3 * t[k]], v[3 * t[k] + 1], v[3 * t[k] + 2]}; };
        parallel_for(nt, threads, [&](std::size_t b, std::size_t e) {
            for (std::size_t i = b; i < e; ++i)
                tight_deviation(f.field(), corner(3 * i), corner(3 * i + 1), corner(3 * i + 2), spacing_m, m2s[i],
                                s2m[i]);
        });
    }
    py::dict out;
    out["mesh_to_surface"] = to_numpy(std::move(m2s), {static_cast<py::ssize_t>(nt)});
    out["surface_to_mesh"] = to_numpy(std::move(s2m), {static_cast<py::ssize_t>(nt)});
    return out;
}

py::dict measure_py(const PyField& f, const Doubles& vertices, const Indices& triangles, int order,
                    int threads) {
    const double* v = rows3(vertices, "vertices");
    if (triangles.ndim() != 2 || triangles.shape(1) != 3)
        throw py::value_error("triangles must have shape (M, 3)");
    std::size_t nv = static_cast<std::size_t>(vertices.shape(0));
    std::size_t nt = static_cast<std::size_t>(triangles.shape(0));
    const std::uint32_t* t = triangles.data();
    for (std::size_t i = 0; i < nt * 3; ++i)
        if (t[i] >= nv) throw py::value_error("triangles refer to a vertex index >= len(vertices)");
    if (order < 2 || order > 32) throw py::value_error("order must be in 2..32");
    std::vector<double> per(nt);
    Deviation d;
    {
        py::gil_scoped_release nogil;
        d = measure(f.field(), v, nv, t, nt, order, threads, per.data());
    }
    py::dict out;
    out["max_m"] = d.max_m;
    out["mesh_to_surface_m"] = d.mesh_to_surface_m;
    out["surface_to_mesh_m"] = d.surface_to_mesh_m;
    out["samples"] = d.samples;
    out["per_triangle"] = to_numpy(std::move(per), {static_cast<py::ssize_t>(nt)});
    return out;
}

// an index array whose every entry is below vertex_count, else ValueError naming the argument
const std::uint32_t* checked_indices(const Indices& a, std::size_t vertex_count, const char* what) {
    const std::uint32_t* p = a.data();
    const std::size_t n = static_cast<std::size_t>(a.size());
    for (std::size_t i = 0; i < n; ++i)
        if (p[i] >= vertex_count)
            throw py::value_error(std::string(what) + "[" + std::to_string(i) + "] = " +
                                  std::to_string(p[i]) + " is not below vertex_count " +
                                  std::to_string(vertex_count));
    return p;
}

}  // namespace

PYBIND11_MODULE(_core, m) {
    m.doc() = "globemill core: terrain field, the whole bake, the edit session, measurement";
    py::class_<PyField>(m, "Field")
        .def(py::init<double, const Doubles&>(), py::arg("radius_m"), py::arg("features"))
        .def_property_readonly("radius_m", &PyField::radius)
        .def("height", &PyField::height, py::arg("directions"))
        .def("gradient", &PyField::gradient, py::arg("directions"))
        .def("wall_distance", &PyField::wall_distance, py::arg("points"));
    py::register_exception<BakeFailure>(m, "BakeError", PyExc_ValueError);
    m.attr("MEASURE_ORDER") = kMeasureOrder;
    m.attr("MIN_ANGLE_DEG") = kMinAngleDeg;
    m.attr("COLLIDER_MIN_ANGLE_DEG") = kColliderMinAngleDeg;
    m.attr("NO_LAYER") = kNoLayer;
    py::class_<PyBake>(m, "Bake")
        .def("pool", &PyBake::pool)
        .def_property_readonly("level_count", &PyBake::level_count)
        .def_property_readonly("chunk_count", &PyBake::chunk_count)
        .def("level", &PyBake::level, py::arg("level"))
        .def("chunk", &PyBake::chunk, py::arg("level"), py::arg("chunk"))
        .def("colliders", &PyBake::colliders)
        .def("stats", &PyBake::stats);
    m.def(
        "surface_attributes",
        [](const PyField& f, const Doubles& dirs) {
            std::vector<Vec3> u = directions(dirs);
            const std::size_t n = u.size();
            std::vector<double> d(3 * n), nrm(3 * n), slope(n), alt(n);
            for (std::size_t i = 0; i < n; ++i) d[3 * i] = u[i].x, d[3 * i + 1] = u[i].y, d[3 * i + 2] = u[i].z;
            {
                py::gil_scoped_release nogil;
                surface_attributes(f.field(), d.data(), n, 0, nrm.data(), slope.data(), alt.data());
            }
            return py::make_tuple(to_numpy(std::move(nrm), {ss(n), 3}), to_numpy(std::move(slope), {ss(n)}),
                                  to_numpy(std::move(alt), {ss(n)}));
        },
        py::arg("field"), py::arg("directions"),
        "(normals (N, 3), slope_deg (N,), altitude_m (N,)) of the true surface at each direction");
    m.def(
        "assign_layers",
        [](const py::object& layers, const Doubles& slope, const Doubles& alt) {
            std::vector<LayerRule> rules = layers_from(layers);
            if (rules.size() > kMaxLayers) throw py::value_error("layers: at most 255 layer rules fit the 8-bit layer attribute");
            if (slope.ndim() != 1 || alt.ndim() != 1 || slope.shape(0) != alt.shape(0))
                throw py::value_error("slope_deg and altitude_m must be 1-d arrays of one length");
            const std::size_t n = static_cast<std::size_t>(slope.shape(0));
            std::vector<std::uint8_t> layer(n);
            std::vector<double> color(3 * n);
            assign_layers(rules, slope.data(), alt.data(), n, layer.data(), color.data());
            return py::make_tuple(to_numpy(std::move(layer), {ss(n)}), to_numpy(std::move(color), {ss(n), 3}));
        },
        py::arg("layers"), py::arg("slope_deg"), py::arg("altitude_m"),
        "(layer (N,) uint8, color (N, 3)) of the first rule whose closed bands hold each vertex");
    m.def(
        "cache_order",
        [](const Indices& tris, std::size_t vertex_count) {
            if (tris.ndim() != 2 || tris.shape(1) != 3)
                throw py::value_error("triangles must have shape (T, 3)");
            const std::uint32_t* t = checked_indices(tris, vertex_count, "triangles");
            const std::size_t n = static_cast<std::size_t>(tris.shape(0));
            std::vector<std::uint32_t> out(3 * n);
            {
                py::gil_scoped_release nogil;
                cache_order(out.data(), t, n, vertex_count);
            }
            return to_numpy(std::move(out), {ss(n), 3});
        },
        py::arg("triangles"), py::arg("vertex_count"),
        "the same (T, 3) triangles in vertex cache order (Forsyth 2006), deterministic");
    m.def(
        "fetch_order",
        [](const Indices& idx, std::size_t vertex_count) {
            const std::uint32_t* p = checked_indices(idx, vertex_count, "indices");
            std::vector<std::uint32_t> remap(vertex_count);
            std::size_t used;
            {
                py::gil_scoped_release nogil;
                used = fetch_order(remap.data(), p, static_cast<std::size_t>(idx.size()), vertex_count);
            }
            return py::make_tuple(to_numpy(std::move(remap), {ss(vertex_count)}), used);
        },
        py::arg("indices"), py::arg("vertex_count"),
        "(remap (vertex_count,) uint32 with remap[old] = new in order of first use, used count)");
    m.def(
        "fifo_misses",
        [](const Indices& idx, std::size_t vertex_count, std::size_t cache_size) {
            if (cache_size < 1) throw py::value_error("cache_size must be at least 1");
            const std::uint32_t* p = checked_indices(idx, vertex_count, "indices");
            py::gil_scoped_release nogil;
            return fifo_misses(p, static_cast<std::size_t>(idx.size()), vertex_count, cache_size);
        },
        py::arg("indices"), py::arg("vertex_count"), py::arg("cache_size"),
        "vertices a FIFO post-transform cache of cache_size entries transforms for the index list");
    m.def(
        "check_lod",
        [](std::optional<int> levels, std::optional<double> ratio, std::optional<int> chunk_level) {
            std::string err;
            raise_status(check_lod(levels ? &*levels : nullptr, ratio ? &*ratio : nullptr,
                                   chunk_level ? &*chunk_level : nullptr, err),
                         err);
        },
        py::arg("levels") = py::none(), py::arg("ratio") = py::none(), py::arg("chunk_level") = py::none(),
        "ValueError naming the setting and its range for a bad levels, ratio or chunk_level (None: not "
        "given), the very check the bake applies");
    m.def("bake", &bake_py, py::arg("field"), py::arg("settings"), py::arg("progress") = nullptr,
          py::arg("on_estimate") = nullptr,
          "bake a world: every level, chunk, seam, attribute and collider, with the GIL released");
    py::class_<PyEditSession>(m, "EditSession")
        .def(py::init<const PyField&, const py::dict&>(), py::arg("field"), py::arg("settings"))
        .def("update", &PyEditSession::update, py::arg("field"), py::arg("layers"))
        .def("result", &PyEditSession::result);
    m.def("measure", &measure_py, py::arg("field"), py::arg("vertices"), py::arg("triangles"),
          py::arg("order") = 6, py::arg("threads") = 0);
    m.def("measure_tight", &measure_tight_py, py::arg("field"), py::arg("vertices"), py::arg("triangles"),
          py::arg("spacing_m") = 0.0, py::arg("threads") = 0);
    m.def(
        "estimate_triangles",
        [](const PyField& f, double tol, int offset, int chunk_level, std::uint64_t survey_cap, int threads) {
            if (offset < 0 || offset > 2) throw py::value_error("offset: must be 0 (radial), 1 (normal) or 2 (exact)");
            if (chunk_level < 0 || chunk_level > 10) throw py::value_error("chunk_level: must be in 0..10");
            py::gil_scoped_release nogil;
            return estimate_triangles(f.field(), tol, static_cast<OffsetMode>(offset), 2 * chunk_level, survey_cap,
                                      threads);
        },
        py::arg("field"), py::arg("tolerance_m"), py::arg("offset") = 1, py::arg("chunk_level") = 0,
        py::arg("survey_cap") = 2000000, py::arg("threads") = 0,
        "leaf triangles the tolerance will need, from the budget survey (0 on a bad tolerance)");
    m.def("icosahedron", []() {
        std::vector<Vec3> v;
        std::vector<std::uint32_t> f;
        icosahedron(v, f);
        std::vector<double> flat;
        for (auto& x : v) flat.insert(flat.end(), {x.x, x.y, x.z});
        py::ssize_t nf = static_cast<py::ssize_t>(f.size() / 3);
        return py::make_tuple(to_numpy(std::move(flat), {12, 3}), to_numpy(std::move(f), {nf, 3}));
    });
}
