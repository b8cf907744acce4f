// the edit session (csrc/session.hpp): incremental bakes equal fresh ones, bit for bit
#include <doctest/doctest.h>

#include <algorithm>
#include <atomic>
#include <memory>
#include <string>
#include <thread>
#include <utility>
#include <vector>

#include "results.hpp"
#include "session.hpp"
#include "worlds.hpp"

using namespace gmtest;
using gm::Vec3;

namespace {

// world A with its first hill moved `metres` along the surface (the other features stay)
std::vector<Row> moved_hill(double metres) {
    std::vector<Row> rows = small_world_rows();
    const Vec3 c{rows[0][3], rows[0][4], rows[0][5]};
    const Vec3 t = gm::normalize(gm::cross(c, Vec3{0, 1, 0}));
    const Vec3 to = along(c, t, 1000, metres);
    rows[0][3] = to.x, rows[0][4] = to.y, rows[0][5] = to.z;
    return rows;
}

gm::Field field_of(const std::vector<Row>& rows) {
    gm::Field f;
    make_field(f, 1000, rows);
    return f;
}

gm::BakeSettings session_settings() { return small_settings(2); }

std::shared_ptr<const gm::BakeResult> fresh(const std::vector<Row>& rows, const gm::BakeSettings& s) {
    auto r = std::make_shared<gm::BakeResult>();
    bake_ok(rows, s, *r);
    return r;
}

void start(gm::EditSession& session, const std::vector<Row>& rows) {
    std::string err;
    const gm::Status st = session.start(field_of(rows), session_settings(), err);
    INFO(err);
    REQUIRE(st == gm::Status::Ok);
}

gm::EditChanges update(gm::EditSession& session, const std::vector<Row>& rows,
                       const std::vector<gm::LayerRule>& layers = session_settings().layers) {
    gm::EditChanges ch;
    std::string err;
    const gm::Status st = session.update(field_of(rows), layers, ch, err);
    INFO(err);
    REQUIRE(st == gm::Status::Ok);
    return ch;
}

std::vector<std::uint32_t> differing_colliders(const gm::BakeResult& a, const gm::BakeResult& b) {
    std::vector<std::uint32_t> out;
    for (std::uint32_t c = 0; c < b.chunk_count; ++c)
        if (!collider_same(*a.colliders.chunks[c], *b.colliders.chunks[c])) out.push_back(c);
    return out;
}

}  // namespace

// the design ("Live editing"): after any edit the result is, bit for bit, a fresh bake of the
// edited spec, and the edit reports which chunks changed; session.hpp: unchanged chunks share
// their buffers, and a result handed out stays as it was
TEST_CASE("an edit equals a fresh bake of the edited world and names exactly the changed chunks") {
    const std::vector<Row> A = small_world_rows(), B = moved_hill(60);
    gm::EditSession session;
    start(session, A);
    const std::shared_ptr<const gm::BakeResult> before = session.result();
    const gm::EditChanges ch = update(session, B);
    const std::shared_ptr<const gm::BakeResult> after = session.result();
    const auto fresh_a = fresh(A, session_settings()), fresh_b = fresh(B, session_settings());

    std::vector<std::string> d = differences(*after, *fresh_b);
    INFO("edited result differs from a fresh bake in: " << joined(d));
    CHECK(d.empty());
    d = differences(*before, *fresh_a);
    INFO("the result handed out before the edit changed in: " << joined(d));
    CHECK(d.empty());

    // the report lists exactly the chunks whose arrays differ, ascending
    const auto changed = differing_chunks(*before, *after);
    CHECK(ch.chunks == changed);
    CHECK(std::is_sorted(ch.chunks.begin(), ch.chunks.end()));
    CHECK(ch.colliders == differing_colliders(*before, *after));
    // a hill moved 60 m on a 1 km world changes some chunks, not all
    const std::size_t all = after->levels.size() * after->chunk_count;
    CHECK(!changed.empty());
    CHECK(changed.size() < all / 4);
    // the chunks it did not change are the very buffers of the previous result
    std::size_t unshared = 0;
    for (std::uint32_t k = 0; k < after->levels.size(); ++k)
        for (std::uint32_t c = 0; c < after->chunk_count; ++c) {
            const bool listed = std::binary_search(changed.begin(), changed.end(), std::make_pair(k, c));
            const bool shared = after->levels[k].chunks[c] == before->levels[k].chunks[c];
            unshared += !listed && !shared;
            CHECK(!(listed && shared));
        }
    CHECK(unshared == 0);

    // a second edit that changes the layers only: still a fresh bake's bytes
    std::vector<gm::LayerRule> layers = session_settings().layers;
    layers[0].slope_deg[0] = 12;
    const gm::EditChanges ch2 = update(session, B, layers);
    gm::BakeSettings s = session_settings();
    s.layers = layers;
    d = differences(*session.result(), *fresh(B, s));
    INFO("after a layer edit: " << joined(d));
    CHECK(d.empty());
    CHECK(ch2.chunks == differing_chunks(*after, *session.result()));
    CHECK(ch2.colliders.empty());  // colliders do not carry layers
}

// session.hpp's thread contract: every call serialises on the session's lock, so two updates
// from two threads run one after the other and the session ends as the last one left it. Which
// ran last shows in the reports: the later one's changes are measured from the earlier's result.
TEST_CASE("a session edited from two threads ends equal to a fresh bake of the last update") {
    const std::vector<Row> A = small_world_rows(), B = moved_hill(60), C = moved_hill(-45);
    const auto fa = fresh(A, session_settings()), fb = fresh(B, session_settings()),
               fc = fresh(C, session_settings());
    for (int round = 0; round < 2; ++round) {
        gm::EditSession session;
        start(session, A);
        std::atomic<int> ready{0};
        gm::EditChanges chb, chc;
        gm::Status sb = gm::Status::Internal, sc = gm::Status::Internal;
        auto run = [&](const std::vector<Row>& rows, gm::EditChanges& ch, gm::Status& st) {
            const gm::Field f = field_of(rows);
            std::string err;
            ++ready;
            while (ready.load() < 2) std::this_thread::yield();  // both start together
            st = session.update(f, session_settings().layers, ch, err);
        };
        std::thread tb(run, std::cref(B), std::ref(chb), std::ref(sb));
        std::thread tc(run, std::cref(C), std::ref(chc), std::ref(sc));
        tb.join();
        tc.join();
        REQUIRE(sb == gm::Status::Ok);
        REQUIRE(sc == gm::Status::Ok);
        const auto end = session.result();
        const bool c_last = differences(*end, *fc).empty();
        const bool b_last = differences(*end, *fb).empty();
        INFO("round " << round);
        REQUIRE(b_last != c_last);  // equal to exactly one fresh bake
        if (c_last) {
            CHECK(chb.chunks == differing_chunks(*fa, *fb));
            CHECK(chc.chunks == differing_chunks(*fb, *fc));
        } else {
            CHECK(chc.chunks == differing_chunks(*fa, *fc));
            CHECK(chb.chunks == differing_chunks(*fc, *fb));
        }
    }
}

// session.hpp: an update before start, or one that changes the radius, is refused and the
// session stays as it was
TEST_CASE("a session refuses updates it cannot make and stays as it was") {
    gm::EditSession session;
    gm::EditChanges ch;
    std::string err;
    CHECK(session.update(field_of(small_world_rows()), {}, ch, err) == gm::Status::InvalidArgument);
    CHECK(err.find("start") != std::string::npos);
    CHECK(!session.result());
    start(session, small_world_rows());
    const auto before = session.result();
    gm::Field other;
    make_field(other, 2000, small_world_rows());
    err.clear();
    CHECK(session.update(other, session_settings().layers, ch, err) == gm::Status::InvalidArgument);
    CHECK(err.rfind("radius_m:", 0) == 0);
    CHECK(session.result().get() == before.get());
}
