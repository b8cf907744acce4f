// live editing: incremental re-bakes that equal a fresh bake.
#include "session.hpp"

#include <chrono>

namespace gm {

Status EditSession::start(const Field& field, const BakeSettings& settings, std::string& error) {
    std::lock_guard<std::mutex> g(lock_);
    auto state = std::make_unique<BakeState>();
    auto result = std::make_shared<BakeResult>();
    Status st = bake(field, settings, *result, error, nullptr, state.get());
    if (st != Status::Ok) return st;
    settings_ = settings;
    settings_.progress = nullptr;
    settings_.on_estimate = nullptr;
    field_ = std::make_shared<Field>(field);
    state_ = std::move(state);
    result_ = std::move(result);
    return Status::Ok;
}

std::shared_ptr<const BakeResult> EditSession::result() const {
    std::lock_guard<std::mutex> g(lock_);
    return result_;
}

Status EditSession::update(const Field& field, const std::vector<LayerRule>& layers, EditChanges& changes,
                           std::string& error) {
    const auto t0 = std::chrono::steady_clock::now();
    std::lock_guard<std::mutex> g(lock_);
    changes = EditChanges{};
    if (!result_) {
        error = "the edit session has no world: start it first";
        return Status::InvalidArgument;
    }
    if (field.radius() != settings_.radius_m) {
        error = "radius_m: an edit may not change the world's radius";
        return Status::InvalidArgument;
    }
    BakeSettings settings = settings_;
    settings.layers = layers;
    Incremental inc;
    inc.previous = state_.get();
    inc.previous_result = result_.get();
    edit_caps(*field_, field, result_->plan.finest_m, inc.changed, inc.margin_m);
    auto state = std::make_unique<BakeState>();
    auto result = std::make_shared<BakeResult>();
    Status st = bake(field, settings, *result, error, &inc, state.get());
    if (st != Status::Ok) return st;
    const BakeResult& a = *result_;
    const BakeResult& b = *result;
    for (std::size_t k = 0; k < b.levels.size(); ++k)
        for (std::uint32_t c = 0; c < b.chunk_count; ++c) {
            const auto& x = a.levels[k].chunks[c];
            const auto& y = b.levels[k].chunks[c];
            if (x != y && !same_chunk(*x, *y)) changes.chunks.emplace_back(static_cast<std::uint32_t>(k), c);
        }
    if (b.colliders.made)
        for (std::uint32_t c = 0; c < b.chunk_count; ++c)
            if (!same_collider(*a.colliders.chunks[c], *b.colliders.chunks[c])) changes.colliders.push_back(c);
    settings_ = settings;
    field_ = std::make_shared<Field>(field);
    state_ = std::move(state);
    result_ = std::move(result);
    changes.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    return Status::Ok;
}

}  // namespace gm
