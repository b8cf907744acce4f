// live editing: a world kept in memory, re-baked incrementally after each change of its features
// or layers. after any sequence of updates the result is, bit for bit, a fresh bake of the
// current world; each update names the chunks whose buffers changed.
//
// thread contract: every call serialises on the session's own lock, so concurrent calls from
// several threads are safe and run one after another. a result handed out stays valid (and
// unchanged) after later updates: results are shared, never modified.
#pragma once

#include <cstdint>
#include <memory>
#include <mutex>
#include <string>
#include <utility>
#include <vector>

#include "bake.hpp"

namespace gm {

struct EditChanges {
    // (level, chunk) pairs whose ChunkMesh arrays differ from the previous result, ascending
    std::vector<std::pair<std::uint32_t, std::uint32_t>> chunks;
    std::vector<std::uint32_t> colliders;  // chunks whose collider changed, ascending
    double seconds = 0;                    // wall time of the update
};

class EditSession {
public:
    // bake `field` with `settings` (the settings stay fixed for the session, but for the layers)
    Status start(const Field& field, const BakeSettings& settings, std::string& error);
    // the world's features (the field) and layers changed: bake incrementally. on failure the
    // session stays as it was.
    Status update(const Field& field, const std::vector<LayerRule>& layers, EditChanges& changes,
                  std::string& error);
    std::shared_ptr<const BakeResult> result() const;

private:
    mutable std::mutex lock_;
    BakeSettings settings_;
    std::shared_ptr<const Field> field_;
    std::unique_ptr<BakeState> state_;
    std::shared_ptr<const BakeResult> result_;
};

}  // namespace gm
