// pybind11 glue for globemill._core: arrays in and out, GIL released around core work.
// float64 positions and directions, uint32 triangle indices.
#include <pybind11/functional.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <cmath>
#include <memory>
#include <stdexcept>
#include <string>
#include <vector>

#include "field.hpp"
#include "lod.hpp"
#include "measure.hpp"
#include "refine.hpp"

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

void raise_status(Status s, const std::string& msg) {
    switch (s) {
        case Status::Ok:
            return;
        case Status::InvalidArgument:
        case Status::NonFinite:
            throw py::value_error(msg);
        case Status::BudgetExceeded:
            throw py::value_error(msg);
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

RefineOptions make_options(double tolerance, int mode, std::uint64_t max_triangles, int threads,
                           int verify_order, int min_level,
                           std::function<void(int, std::uint64_t)>& progress) {
    if (mode < 0 || mode > 2) throw py::value_error("offset mode must be 0 (radial), 1 (normal) or 2 (exact)");
    if (verify_order == 1 || verify_order < 0 || verify_order > 32)
        throw py::value_error("verify_order must be 0 (off) or in 2..32");
    RefineOptions opt;
    opt.tolerance_m = tolerance;
    opt.mode = static_cast<OffsetMode>(mode);
    opt.max_triangles = max_triangles;
    opt.threads = threads;
    opt.verify_order = verify_order;
    opt.min_level = min_level;
    if (progress) {
        opt.progress = [&progress](int round, std::uint64_t leaves) {
            py::gil_scoped_acquire gil;
            progress(round, leaves);
        };
    }
    return opt;
}

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
    return st;
}

py::dict refine_py(const PyField& f, double tolerance, int mode, std::uint64_t max_triangles,
                   int threads, int verify_order, std::function<void(int, std::uint64_t)> progress) {
    RefineOptions opt = make_options(tolerance, mode, max_triangles, threads, verify_order, 0, progress);
    Mesh mesh;
    RefineStats stats;
    std::string err;
    Status s;
    {
        py::gil_scoped_release nogil;
        s = refine(f.field(), opt, mesh, stats, err);
    }
    raise_status(s, err);
    py::ssize_t nv = static_cast<py::ssize_t>(mesh.positions.size() / 3);
    py::ssize_t nt = static_cast<py::ssize_t>(mesh.triangles.size() / 3);
    py::dict out;
    out["vertices"] = to_numpy(std::move(mesh.positions), {nv, 3});
    out["directions"] = to_numpy(std::move(mesh.directions), {nv, 3});
    out["triangles"] = to_numpy(std::move(mesh.triangles), {nt, 3});
    out["levels"] = to_numpy(std::move(mesh.levels), {nt});
    out["errors"] = to_numpy(std::move(mesh.errors), {nt});
    out["stats"] = stats_dict(stats);
    return out;
}

// the bisection hierarchy of one world: built once, levels extracted on demand
class PyHierarchy {
public:
    PyHierarchy(const PyField& f, double tolerance, int mode, std::uint64_t max_triangles,
                int threads, int verify_order, int chunk_level, double tau_cap,
                std::function<void(int, std::uint64_t)> progress)
        : field_(f), threads_(threads), verify_order_(verify_order) {
        if (chunk_level < 0 || chunk_level > 10) throw py::value_error("chunk_level must be in 0..10");
        opt_ = make_options(tolerance, mode, max_triangles, threads, verify_order, 2 * chunk_level,
                            progress);
        opt_.tau_cap = tau_cap;
        build(nullptr, {}, 0);
        opt_.progress = nullptr;
    }

    // the same options over `f`, a field that differs from this hierarchy's only inside the
    // caps `changed` ((n, 4): centre x, y, z and angle in radians): nodes clear of them take
    // their tests from this hierarchy. the result is what a fresh build over `f` makes.
    std::unique_ptr<PyHierarchy> rebuild(const PyField& f, const Doubles& changed, double margin_m) const {
        if (changed.ndim() != 2 || changed.shape(1) != 4) throw py::value_error("changed must have shape (n, 4)");
        std::vector<Cap> caps;
        for (py::ssize_t i = 0; i < changed.shape(0); ++i) {
            const double* r = changed.data() + 4 * i;
            caps.push_back({Vec3{r[0], r[1], r[2]}, r[3]});
        }
        if (!(margin_m >= 0) || !std::isfinite(margin_m)) throw py::value_error("margin_m must be finite and >= 0");
        std::unique_ptr<PyHierarchy> out(new PyHierarchy(f, opt_, threads_, verify_order_));
        out->build(&h_, std::move(caps), margin_m);
        return out;
    }

    py::dict stats() const { return stats_dict(stats_); }
    std::size_t vertex_count() const { return h_.dir.size(); }
    std::size_t chunk_count() const { return h_.chunks; }

    py::tuple vertices() const {
        const std::size_t nv = h_.dir.size();
        std::vector<double> pos(3 * nv), dirs(3 * nv);
        for (std::size_t i = 0; i < nv; ++i) {
            Vec3 p = h_.pos(static_cast<std::uint32_t>(i));
            pos[3 * i] = p.x;
            pos[3 * i + 1] = p.y;
            pos[3 * i + 2] = p.z;
            dirs[3 * i] = h_.dir[i].x;
            dirs[3 * i + 1] = h_.dir[i].y;
            dirs[3 * i + 2] = h_.dir[i].z;
        }
        std::vector<std::uint32_t> vp(h_.vparent);
        const py::ssize_t V = static_cast<py::ssize_t>(nv);
        return py::make_tuple(to_numpy(std::move(pos), {V, 3}), to_numpy(std::move(dirs), {V, 3}),
                              to_numpy(std::move(vp), {V, 2}));
    }

    // per vertex, its counterpart in the hierarchy this one was rebuilt from (kNone: new)
    py::array_t<std::uint32_t> vertex_origin() const {
        std::vector<std::uint32_t> v(h_.vorigin);
        return to_numpy(std::move(v), {static_cast<py::ssize_t>(v.size())});
    }

    py::dict extract(std::vector<double> tolerances, bool stitch, bool keep,
                     const PyHierarchy* previous) {
        for (std::size_t i = 0; i < tolerances.size(); ++i) {
            if (!(tolerances[i] > 0) || !std::isfinite(tolerances[i]))
                throw py::value_error("tolerances must be finite and > 0");
            if (i && !(tolerances[i] > tolerances[i - 1]))
                throw py::value_error("tolerances must increase from the finest level");
        }
        std::vector<Level> levels;
        ChunkInfo chunks;
        std::string err;
        Status s;
        {
            py::gil_scoped_release nogil;
            const bool memo = previous && !previous->kept_.empty() &&
                              previous->kept_tolerances_ == tolerances && previous->kept_stitch_ == stitch;
            s = extract_levels(field_.field(), h_, tolerances, verify_order_, threads_, stitch,
                               levels, chunks, err, memo ? &previous->h_ : nullptr,
                               memo ? &previous->kept_ : nullptr);
        }
        raise_status(s, err);
        if (keep) {
            kept_ = levels;
            kept_tolerances_ = tolerances;
            kept_stitch_ = stitch;
        }
        const py::ssize_t V = static_cast<py::ssize_t>(h_.dir.size());
        const py::ssize_t C = static_cast<py::ssize_t>(h_.chunks);
        py::list lvls;
        for (Level& lv : levels) {
            py::dict d;
            py::ssize_t T = static_cast<py::ssize_t>(lv.chunk.size());
            py::ssize_t S = static_cast<py::ssize_t>(lv.stitch.size() / 3);
            d["tolerance_m"] = lv.tolerance_m;
            d["triangles"] = to_numpy(std::move(lv.triangles), {T, 3});
            d["chunk"] = to_numpy(std::move(lv.chunk), {T});
            d["errors"] = to_numpy(std::move(lv.errors), {T});
            d["present"] = to_numpy(std::move(lv.present), {V});
            d["morph"] = to_numpy(std::move(lv.morph), {V, 3});
            d["interior"] = to_numpy(std::move(lv.interior), {C});
            d["stitch"] = to_numpy(std::move(lv.stitch), {S, 3});
            d["stitch_offsets"] = to_numpy(std::move(lv.stitch_offsets), {C * 8 + 1});
            d["stitch_failures"] = lv.stitch_failures;
            d["same"] = to_numpy(std::move(lv.same), {C});
            d["repaired"] = lv.repaired;
            d["max_error_m"] = lv.max_error_m;
            d["mesh_to_surface_m"] = lv.mesh_to_surface_m;
            d["surface_to_mesh_m"] = lv.surface_to_mesh_m;
            lvls.append(d);
        }
        py::dict ch;
        ch["corners"] = to_numpy(std::move(chunks.corners), {C, 3});
        ch["neighbors"] = to_numpy(std::move(chunks.neighbors), {C, 3});
        ch["edge_ids"] = to_numpy(std::move(chunks.edge_ids), {C, 3});
        py::dict out;
        out["levels"] = lvls;
        out["chunks"] = ch;
        return out;
    }

private:
    PyHierarchy(const PyField& f, const RefineOptions& opt, int threads, int verify_order)
        : field_(f), threads_(threads), verify_order_(verify_order), opt_(opt) {}

    void build(const Hierarchy* previous, std::vector<Cap> changed, double margin_m) {
        RefineOptions opt = opt_;
        opt.previous = previous;
        opt.changed = std::move(changed);
        opt.changed_margin_m = margin_m;
        std::string err;
        Status s;
        {
            py::gil_scoped_release nogil;
            s = build_hierarchy(field_.field(), opt, h_, stats_, err);
        }
        raise_status(s, err);
    }

    const PyField& field_;
    int threads_, verify_order_;
    RefineOptions opt_;
    Hierarchy h_;
    RefineStats stats_;
    std::vector<Level> kept_;  // the last extraction, kept for an incremental one
    std::vector<double> kept_tolerances_;
    bool kept_stitch_ = false;
};

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

}  // namespace

PYBIND11_MODULE(_core, m) {
    m.doc() = "globemill core: terrain field, adaptive refinement, measurement";
    py::class_<PyField>(m, "Field")
        .def(py::init<double, const Doubles&>(), py::arg("radius_m"), py::arg("features"))
        .def_property_readonly("radius_m", &PyField::radius)
        .def("height", &PyField::height, py::arg("directions"))
        .def("gradient", &PyField::gradient, py::arg("directions"))
        .def("wall_distance", &PyField::wall_distance, py::arg("points"));
    m.def(
        "edit_caps",
        [](const PyField& before, const PyField& after, double tolerance_m) {
            std::vector<Cap> caps;
            double margin = 0;
            edit_caps(before.field(), after.field(), tolerance_m, caps, margin);
            std::vector<double> out;
            for (const Cap& c : caps) out.insert(out.end(), {c.c.x, c.c.y, c.c.z, c.angle});
            return py::make_tuple(to_numpy(std::move(out), {static_cast<py::ssize_t>(caps.size()), 4}), margin);
        },
        py::arg("before"), py::arg("after"), py::arg("tolerance_m"),
        "the caps an edit from field `before` to `after` changed ((n, 4): centre x, y, z, angle) and "
        "the margin for Hierarchy.rebuild");
    m.def("refine", &refine_py, py::arg("field"), py::arg("tolerance_m"), py::arg("offset"),
          py::arg("max_triangles"), py::arg("threads") = 0, py::arg("verify_order") = 3,
          py::arg("progress") = nullptr);
    py::class_<PyHierarchy>(m, "Hierarchy")
        .def(py::init<const PyField&, double, int, std::uint64_t, int, int, int, double,
                      std::function<void(int, std::uint64_t)>>(),
             py::arg("field"), py::arg("tolerance_m"), py::arg("offset"), py::arg("max_triangles"),
             py::arg("threads") = 0, py::arg("verify_order") = 3, py::arg("chunk_level") = 0,
             py::arg("tau_cap") = 0.0, py::arg("progress") = nullptr, py::keep_alive<1, 2>())
        .def("stats", &PyHierarchy::stats)
        .def_property_readonly("vertex_count", &PyHierarchy::vertex_count)
        .def_property_readonly("chunk_count", &PyHierarchy::chunk_count)
        .def("vertices", &PyHierarchy::vertices)
        .def("rebuild", &PyHierarchy::rebuild, py::arg("field"), py::arg("changed"),
             py::arg("margin_m"), py::keep_alive<0, 2>())
        .def("vertex_origin", &PyHierarchy::vertex_origin)
        .def("extract", &PyHierarchy::extract, py::arg("tolerances"), py::arg("stitch") = true,
             py::arg("keep") = false, py::arg("previous") = nullptr);
    m.def("measure", &measure_py, py::arg("field"), py::arg("vertices"), py::arg("triangles"),
          py::arg("order") = 6, py::arg("threads") = 0);
    m.def("estimate_triangles",
          [](const PyField& f, double tol) { return estimate_triangles(f.field(), tol); },
          py::arg("field"), py::arg("tolerance_m"));
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
