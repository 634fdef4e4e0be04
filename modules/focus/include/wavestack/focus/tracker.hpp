#pragma once
// Focus tracking across the frames of a series: each frame is searched in a
// narrow window of coarse planes centred on the previous frame's focus, and
// in the full range when there is no previous focus or the window loses the
// peak.
//
// Window: the coarse planes nearest_plane(previous) ± half_window (default 8
// planes, i.e. ±4 µm at a 0.5 µm step, about ±2.7 depths of field λ0·n/NA²
// at NA 0.75), clamped to the range (and widened to 3 planes at least).
// Fallback: when the window result is unsure for any reason — the extremum
// at the window's edge (the focus moved out of it), a flat curve or a peak
// at noise level — the same frame is searched again over the full range and
// that result is returned. A focus drifting by up to about half_window - 1
// steps per frame is followed without fallback.
//
// The tracker is stateful and must see the frames in order (one tracker per
// series, called serially); the sweep inside each call is parallel.
#include "wavestack/focus/search.hpp"

#include <cstddef>
#include <limits>
#include <memory>

namespace wavestack::focus {

struct TrackerOptions {
  /// Coarse planes on each side of the previous focus (>= 1, default 8).
  std::size_t half_window = 8;
};

class Tracker {
public:
  /// `search` is planned for the full range; it is shared (read-only), so
  /// one planned search may serve several trackers. Error(config) for a
  /// null search or half_window == 0.
  explicit Tracker(std::shared_ptr<const Search> search, TrackerOptions options = {});

  const Search& search() const noexcept { return *search_; }
  Search::Workspace make_workspace() const { return search_->make_workspace(); }

  /// Focus of the next frame. The returned reference stays valid until the
  /// next call; its buffers are reused (no allocation in steady state).
  const FocusResult& track(ImageView<const cfloat> field, Search::Workspace& ws);

  /// Forget the previous focus (the next frame is searched over the full range).
  void reset() noexcept;
  /// True when the last call searched the window and then fell back to the full range.
  bool fell_back() const noexcept { return fell_back_; }
  /// True when the last call searched a window (and did not fall back).
  bool windowed() const noexcept { return windowed_; }
  /// Number of fallbacks since construction or reset().
  std::size_t fallbacks() const noexcept { return fallbacks_; }
  /// The focus the next window is centred on; NaN when there is none.
  double locked_distance() const noexcept { return lock_; }
  const FocusResult& last() const noexcept { return result_; }

private:
  std::shared_ptr<const Search> search_;
  TrackerOptions options_;
  FocusResult result_;
  double lock_ = std::numeric_limits<double>::quiet_NaN();
  bool fell_back_ = false, windowed_ = false;
  std::size_t fallbacks_ = 0;
};

} // namespace wavestack::focus
