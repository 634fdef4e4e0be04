#include "wavestack/focus/tracker.hpp"

#include "wavestack/core/error.hpp"

#include <algorithm>
#include <cmath>

namespace wavestack::focus {

Tracker::Tracker(std::shared_ptr<const Search> search, TrackerOptions options)
    : search_(std::move(search)), options_(options) {
  if (!search_) fail_config("focus tracker: no search given");
  if (options_.half_window == 0) fail_config("focus tracker: half_window must be at least 1 plane");
}

void Tracker::reset() noexcept {
  lock_ = std::numeric_limits<double>::quiet_NaN();
  fell_back_ = windowed_ = false;
  fallbacks_ = 0;
}

const FocusResult& Tracker::track(ImageView<const cfloat> field, Search::Workspace& ws) {
  fell_back_ = windowed_ = false;
  const std::size_t s = search_->planes();
  if (std::isfinite(lock_)) {
    const std::size_t c = search_->nearest_plane(lock_);
    const std::size_t k = options_.half_window;
    std::size_t a = c > k ? c - k : 0, b = std::min(s - 1, c + k);
    while (b - a < 2) { // at least 3 planes (s >= 3 by construction)
      if (a > 0) --a;
      if (b - a < 2 && b + 1 < s) ++b;
    }
    if (a == 0 && b == s - 1) {
      search_->run(field, result_, ws);
    } else {
      search_->run_window(field, a, b, result_, ws);
      windowed_ = true;
      if (!result_.sure) {
        const std::size_t window_cost = result_.propagations;
        search_->run(field, result_, ws);
        result_.propagations += window_cost;
        fell_back_ = true;
        windowed_ = false;
        ++fallbacks_;
      }
    }
  } else {
    search_->run(field, result_, ws);
  }
  lock_ = result_.sure ? result_.distance : std::numeric_limits<double>::quiet_NaN();
  return result_;
}

} // namespace wavestack::focus
