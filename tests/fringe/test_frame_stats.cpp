#include "wavestack/fringe/conditioner.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <limits>

using namespace wavestack;
using namespace wavestack::fringe;

TEST_CASE("frame statistics count saturated and non-finite pixels") {
  // Definitions documented in conditioner.hpp [common practice]: min/max/mean
  // over finite pixels, saturated = value >= level (+Inf included), fraction
  // of all pixels.
  Image<float> img(4, 5);
  for (std::size_t i = 0; i < img.size(); ++i) img.data()[i] = static_cast<float>(i); // 0..19
  img(0, 1) = std::numeric_limits<float>::quiet_NaN();
  img(0, 2) = std::numeric_limits<float>::infinity();
  img(3, 4) = 255.0f;
  const FrameStats s = frame_stats(img.view(), 255.0f);
  CHECK(s.count == 20);
  CHECK(s.nonfinite == 2);
  CHECK(s.min == 0.0f);
  CHECK(s.max == 255.0f);
  // finite values: 0,3..18,255  -> sum = (0+3+...+18) + 255
  double sum = 0;
  for (int v = 3; v <= 18; ++v) sum += v;
  sum += 255.0;
  CHECK(s.mean == Approx(sum / 18.0).epsilon(1e-12));
  CHECK(s.saturated_fraction == Approx(2.0 / 20.0).epsilon(1e-12)); // 255 and +Inf

  const FrameStats off = frame_stats(img.view(), 0.0f);
  CHECK(off.saturated_fraction == 0.0);
}

TEST_CASE("frame statistics of an all-NaN frame report no finite pixels") {
  Image<float> img(3, 3, std::numeric_limits<float>::quiet_NaN());
  const FrameStats s = frame_stats(img.view(), 1.0f);
  CHECK(s.nonfinite == 9);
  CHECK(s.mean == 0.0);
  CHECK(s.saturated_fraction == 0.0);
}
