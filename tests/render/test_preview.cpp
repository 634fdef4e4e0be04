// PNG previews: read back with cv::imread and checked pixel by pixel.
#include "wavestack/core/error.hpp"
#include "wavestack/render/plot.hpp"
#include "wavestack/render/preview.hpp"

#include <catch2/catch.hpp>
#include <opencv2/imgcodecs.hpp>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <memory>

#include <unistd.h>

using namespace wavestack;
using namespace wavestack::render;
namespace fs = std::filesystem;

namespace {

struct TempDir {
  fs::path path;
  explicit TempDir(const std::string& name) {
    path = fs::path(WAVESTACK_BINARY_DIR) / "test-tmp" / ("render_" + name + "_" + std::to_string(::getpid()));
    fs::remove_all(path);
    fs::create_directories(path);
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path, ec);
  }
  std::string operator/(const std::string& f) const { return (path / f).string(); }
};

Rgb pixel(const cv::Mat& bgr, int y, int x) {
  const cv::Vec3b c = bgr.at<cv::Vec3b>(y, x);
  return {c[2], c[1], c[0]};
}

int distance(Rgb a, Rgb b) {
  return std::max({std::abs(a.r - b.r), std::abs(a.g - b.g), std::abs(a.b - b.b)});
}

/// A horizontal ramp from `lo` (column 0) to `hi` (last column).
Image<float> ramp(std::size_t h, std::size_t w, double lo, double hi) {
  Image<float> img(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x)
      img(y, x) = static_cast<float>(lo + (hi - lo) * static_cast<double>(x) / static_cast<double>(w - 1));
  return img;
}

/// Data of percentile_reference.py.
Image<float> test_data(std::size_t h, std::size_t w) {
  Image<float> img(h, w);
  for (std::size_t i = 0; i < h * w; ++i) {
    const double di = static_cast<double>(i);
    img.data()[i] = i % 23 == 0 ? NAN : static_cast<float>(std::sin(0.37 * di) * static_cast<double>(i % 17) + 0.01 * di);
  }
  return img;
}

template <class F> Error error_of(F&& f) {
  try {
    f();
  } catch (const Error& e) {
    return e;
  }
  FAIL("no wavestack::Error was thrown");
  throw;
}

} // namespace

TEST_CASE("a preview PNG reads back with the size of its layout and 3 channels") {
  TempDir dir("basic");
  for (auto [h, w] : {std::pair{16, 16}, std::pair{37, 53}, std::pair{300, 200}, std::pair{1200, 1920}}) {
    INFO(h << "x" << w);
    const Image<float> img = ramp(static_cast<std::size_t>(h), static_cast<std::size_t>(w), -1, 1);
    PreviewOptions o;
    o.title = "Phase";
    o.units = "rad";
    o.pixel_pitch_m = 0.2e-6;
    const std::string path = dir / "p.png";
    const PreviewLayout L = write_preview(path, img, o);
    const cv::Mat png = cv::imread(path, cv::IMREAD_UNCHANGED);
    REQUIRE_FALSE(png.empty());
    CHECK(png.channels() == 3);
    CHECK(png.cols == L.canvas_width);
    CHECK(png.rows == L.canvas_height);
    CHECK(L.image_x + L.image_width < L.bar_x);
    CHECK(L.bar_x + L.bar_width < L.canvas_width);
    CHECK(L.image_y + L.image_height <= L.canvas_height);
    // small images are enlarged by an integer factor, large ones reduced to <= 1024
    const int longest = std::max(L.image_width, L.image_height);
    CHECK(longest <= 1024);
    CHECK(longest >= std::min(400, std::max(h, w)));
    if (std::max(h, w) < 400) CHECK(L.zoom == std::floor(L.zoom));
  }
}

TEST_CASE("colormap ends match the published colormap data") {
  // Endpoint values of matplotlib's listed colormaps (_cm_listed.py: viridis by
  // van der Walt & Smith; cividis by Nuñez, Anderton & Renslow, PLoS ONE 2018;
  // twilight by Hauenstein), scaled to 0-255. OpenCV ships the same tables.
  CHECK(distance(colormap_color(Colormap::viridis, 0), {68, 1, 84}) <= 1);    // (0.267004, 0.004874, 0.329415)
  CHECK(distance(colormap_color(Colormap::viridis, 1), {253, 231, 37}) <= 1); // (0.993248, 0.906157, 0.143936)
  CHECK(distance(colormap_color(Colormap::cividis, 0), {0, 34, 78}) <= 1);    // (0.0, 0.135112, 0.304751)
  CHECK(distance(colormap_color(Colormap::cividis, 1), {254, 232, 56}) <= 1); // (0.995737, 0.909344, 0.217772)
  CHECK(distance(colormap_color(Colormap::twilight, 0), {226, 217, 226}) <= 1); // (0.88575, 0.85000, 0.88797)
  CHECK(colormap_color(Colormap::gray, 0) == Rgb{0, 0, 0});
  CHECK(colormap_color(Colormap::gray, 1) == Rgb{255, 255, 255});
  CHECK(colormap_color(Colormap::viridis, -3) == colormap_color(Colormap::viridis, 0)); // clamped
  CHECK(colormap_color(Colormap::viridis, NAN) == nodata_color());
}

TEST_CASE("a ramp maps its minimum and maximum to the colormap ends") {
  TempDir dir("ramp");
  for (Colormap map : {Colormap::viridis, Colormap::cividis, Colormap::gray}) {
    for (bool fixed : {true, false}) {
      INFO(colormap_name(map) << (fixed ? " fixed range" : " robust range"));
      const Image<float> img = ramp(40, 101, 2.0, 7.0);
      PreviewOptions o;
      o.colormap = map;
      if (fixed) o.range = std::pair{2.0, 7.0};
      const std::string path = dir / "ramp.png";
      const PreviewLayout L = write_preview(path, img, o);
      const cv::Mat png = cv::imread(path);
      REQUIRE_FALSE(png.empty());
      const int y = L.image_y + L.image_height / 2;
      // first and last display column hold data columns 0 and 100
      CHECK(pixel(png, y, L.image_x) == colormap_color(map, 0));
      CHECK(pixel(png, y, L.image_x + L.image_width - 1) == colormap_color(map, 1));
      // the colour bar: top = high end, bottom = low end
      CHECK(pixel(png, L.bar_y, L.bar_x + L.bar_width / 2) == colormap_color(map, 1));
      CHECK(pixel(png, L.bar_y + L.bar_height - 1, L.bar_x + L.bar_width / 2) == colormap_color(map, 0));
      if (fixed) {
        CHECK(L.low == 2.0);
        CHECK(L.high == 7.0);
      } else {
        // each of the 101 values fills one column of 40 pixels (1% of the
        // image), so the 0.5 and 99.5 percentiles are the end values
        CHECK(L.low == 2.0);
        CHECK(L.high == 7.0);
      }
    }
  }
}

TEST_CASE("cyclic colormaps wrap: the colour at -pi equals the colour at +pi") {
  for (Colormap map : {Colormap::twilight, Colormap::twilight_shifted}) {
    INFO(colormap_name(map));
    CHECK(is_cyclic(map));
    CHECK(distance(colormap_color(map, 0), colormap_color(map, 1)) <= 3);
    // and the ends differ from the middle: it is a cycle, not a constant
    CHECK(distance(colormap_color(map, 0), colormap_color(map, 0.5)) > 100);
  }
  CHECK_FALSE(is_cyclic(Colormap::viridis));
  // in a preview of wrapped phase with the fixed range [-pi, pi]
  TempDir dir("cyclic");
  const Image<float> img = ramp(32, 64, -M_PI, M_PI);
  PreviewOptions o;
  o.colormap = Colormap::twilight_shifted;
  o.range = std::pair{-M_PI, M_PI};
  o.units = "rad";
  const PreviewLayout L = write_preview(dir / "phase.png", img, o);
  const cv::Mat png = cv::imread(dir / "phase.png");
  const int y = L.image_y + 3;
  CHECK(distance(pixel(png, y, L.image_x), pixel(png, y, L.image_x + L.image_width - 1)) <= 3);
}

TEST_CASE("NaN pixels are drawn as a neutral grey hatch and flagged in the layout") {
  TempDir dir("nan");
  Image<float> img = ramp(50, 60, 0, 1);
  for (std::size_t y = 10; y < 20; ++y)
    for (std::size_t x = 30; x < 45; ++x) img(y, x) = NAN;
  PreviewOptions o; // viridis: no grey anywhere in the map
  const PreviewLayout L = write_preview(dir / "nan.png", img, o);
  CHECK(L.has_nodata);
  CHECK(L.zoom == 6); // floor(400 / 60)
  const cv::Mat png = cv::imread(dir / "nan.png");
  auto at = [&](int dy, int dx) {
    return pixel(png, L.image_y + static_cast<int>(dy * L.zoom) + 2, L.image_x + static_cast<int>(dx * L.zoom) + 2);
  };
  for (auto [y, x] : {std::pair{10, 30}, std::pair{15, 40}, std::pair{19, 44}}) {
    const Rgb c = at(y, x);
    CHECK(c.r == c.g);
    CHECK(c.g == c.b);
    CHECK(c.r >= 100);
    CHECK(c.r <= 160);
  }
  const Rgb outside = at(25, 40);
  CHECK(outside == colormap_color(Colormap::viridis, (40.0 / 59.0 - L.low) / (L.high - L.low)));
  // an image without NaN has no "no data" entry
  CHECK_FALSE(write_preview(dir / "ok.png", ramp(50, 60, 0, 1), o).has_nodata);
  // all NaN still renders
  Image<float> none(20, 20, NAN);
  CHECK(write_preview(dir / "none.png", none, o).has_nodata);
}

TEST_CASE("large images are reduced NaN-aware, keeping values") {
  TempDir dir("large");
  Image<float> img(1500, 2100, 5.0f);
  for (std::size_t y = 0; y < 1500; y += 2) img(y, 7) = NAN; // sparse NaN: averaged away
  PreviewOptions o;
  o.range = std::pair{0.0, 10.0};
  const PreviewLayout L = write_preview(dir / "large.png", img, o);
  CHECK(L.image_width == 1024);
  CHECK(L.image_height == 731);
  const cv::Mat png = cv::imread(dir / "large.png");
  CHECK(pixel(png, L.image_y + 100, L.image_x + 3) == colormap_color(Colormap::viridis, 0.5));
}

TEST_CASE("scale bar lengths are 1, 2 or 5 x 10^k um near a fifth of the width") {
  struct Row {
    double width_m, length_m;
    std::string label;
  };
  const std::vector<Row> rows = {
      {100e-6, 20e-6, "20 \xC2\xB5m"},  // 20 um target
      {138e-6, 20e-6, "20 \xC2\xB5m"},  // 27.6 um: 20 is closer than 50 in log scale
      {40e-6, 10e-6, "10 \xC2\xB5m"},   // 8 um: 10 (log 0.22) beats 5 (0.47)
      {7e-6, 1e-6, "1 \xC2\xB5m"},      // 1.4 um: 1 (0.34) beats 2 (0.36)
      {2.5e-6, 0.5e-6, "0.5 \xC2\xB5m"},
      {1e-3, 200e-6, "200 \xC2\xB5m"},
      {10e-3, 2e-3, "2 mm"},
      {6.6e-3, 1e-3, "1 mm"},
  };
  for (const auto& r : rows) {
    INFO(r.width_m);
    const ScaleBar b = choose_scale_bar(r.width_m);
    CHECK(b.length_m == Approx(r.length_m).epsilon(1e-12));
    CHECK(b.label == r.label);
  }
  CHECK(choose_scale_bar(0).length_m == 0);
  // drawn on the image with the chosen length: 800 px at 0.1725 um = 138 um -> 20 um = 116 px
  TempDir dir("scalebar");
  PreviewOptions o;
  o.pixel_pitch_m = 0.1725e-6;
  const PreviewLayout L = write_preview(dir / "bar.png", ramp(500, 800, 0, 1), o);
  CHECK(L.has_scale_bar);
  CHECK(L.scale_bar_m == Approx(20e-6));
  CHECK(L.scale_bar_px == 116);
  const cv::Mat png = cv::imread(dir / "bar.png");
  // the bar is white inside a black outline, 12 px from the image's lower left
  const int y = L.image_y + L.image_height - 12 - 3;
  CHECK(pixel(png, y, L.image_x + 12 + 58) == Rgb{255, 255, 255});
  CHECK(pixel(png, y, L.image_x + 12 + 115) == Rgb{255, 255, 255});
  CHECK(pixel(png, y, L.image_x + 12 + 116) == Rgb{0, 0, 0});
  // no pitch, no bar
  CHECK_FALSE(write_preview(dir / "nobar.png", ramp(50, 80, 0, 1), PreviewOptions{}).has_scale_bar);
}

TEST_CASE("robust_range equals numpy.nanpercentile") {
  const std::size_t h = 37, w = 53;
  const Image<float> img = test_data(h, w);
  for (auto [lo, hi] : {std::pair{0.5, 99.5}, std::pair{0.0, 100.0}, std::pair{10.0, 75.0}}) {
    const std::string cmd = "/usr/bin/python3 '" WAVESTACK_SOURCE_DIR "/tests/render/percentile_reference.py' " +
                            std::to_string(h) + " " + std::to_string(w) + " " + std::to_string(lo) + " " +
                            std::to_string(hi);
    std::unique_ptr<FILE, int (*)(FILE*)> pipe(::popen(cmd.c_str(), "r"), ::pclose);
    REQUIRE(pipe);
    double ref_lo = NAN, ref_hi = NAN;
    REQUIRE(std::fscanf(pipe.get(), "%lf %lf", &ref_lo, &ref_hi) == 2);
    const auto [got_lo, got_hi] = robust_range(img, lo, hi);
    INFO(lo << " " << hi);
    CHECK(got_lo == Approx(ref_lo).epsilon(1e-12));
    CHECK(got_hi == Approx(ref_hi).epsilon(1e-12));
  }
  CHECK(robust_range(Image<float>(4, 4, NAN)) == std::pair{0.0, 1.0});
  const auto flat = robust_range(Image<float>(4, 4, 3.0f));
  CHECK(flat.first < 3.0);
  CHECK(flat.second > 3.0);
}

TEST_CASE("ticks are round numbers with as many decimals as the step needs") {
  CHECK(nice_ticks(0, 1, 5) == std::vector<double>{0, 0.2, 0.4, 0.6000000000000001, 0.8, 1});
  const auto t = nice_ticks(-3.2, 3.2, 5);
  REQUIRE(t.size() == 7);
  CHECK(t.front() == Approx(-3));
  CHECK(t.back() == Approx(3));
  CHECK(nice_ticks(1, 1).empty());
  CHECK(format_tick(0.6000000000000001, 0.2) == "0.6");
  CHECK(format_tick(-3, 1) == "-3");
  CHECK(format_tick(12.5, 2.5) == "12.5");
  CHECK(format_tick(250, 50) == "250");
  CHECK(format_tick(2e-8, 1e-8) == "2e-8");
  CHECK(format_tick(1.5e5, 5e4) == "1.5e5");
  CHECK(format_tick(0, 0.1) == "0");
}

TEST_CASE("a curve plot has axes, the curve and the marked point") {
  TempDir dir("plot");
  std::vector<double> xs, ys;
  for (int i = 0; i <= 40; ++i) {
    xs.push_back(-20 + i);
    ys.push_back(1.0 / (1 + std::pow((xs.back() - 3.0) / 5.0, 2)));
  }
  ys[5] = NAN; // breaks the line, no error
  const std::string path = dir / "curve.png";
  const PlotLayout L = write_curve_plot(path, xs, ys, "distance (\xC2\xB5m)", "metric (a.u.)", 3.0, "Focus");
  const cv::Mat png = cv::imread(path);
  REQUIRE_FALSE(png.empty());
  CHECK(png.channels() == 3);
  CHECK(png.cols == L.width);
  CHECK(png.rows == L.height);
  CHECK(L.x_min == -20);
  CHECK(L.x_max == 20);
  CHECK(L.y_min < 0.04);
  CHECK(L.y_max > 1.0);
  // the marker is orange-red (BGR 40, 80, 220), dashed, at x = 3
  const int mx = L.plot_x + static_cast<int>(std::lround(23.0 / 40.0 * (L.plot_width - 1)));
  int marker = 0;
  for (int y = L.plot_y; y < L.plot_y + L.plot_height; ++y) marker += pixel(png, y, mx) == Rgb{220, 80, 40};
  CHECK(marker > L.plot_height / 3);
  // the axes box is drawn in dark ink
  CHECK(distance(pixel(png, L.plot_y - 1, L.plot_x + 10), {40, 40, 40}) <= 10);
  // the curve (dark blue) passes through the plot
  int curve = 0;
  for (int y = 0; y < png.rows; ++y)
    for (int x = 0; x < png.cols; ++x) curve += distance(pixel(png, y, x), {20, 90, 150}) <= 10;
  CHECK(curve > 500);

  CHECK(error_of([&] { write_curve_plot(path, std::vector<double>{1, 2}, std::vector<double>{1}, "x", "y"); })
            .kind() == ErrorKind::internal);
  // a single point and a flat curve still plot
  CHECK(write_curve_plot(path, std::vector<double>{1}, std::vector<double>{2}, "x", "y", 1.0).width == 720);
  CHECK(write_curve_plot(path, std::vector<double>{1, 2, 3}, std::vector<double>{2, 2, 2}, "x", "y").y_max > 2);
}

TEST_CASE("PNG write failures are output errors naming the path") {
  TempDir dir("errors");
  const Image<float> img = ramp(20, 20, 0, 1);
  const std::string missing = dir / "no/such/folder/p.png";
  const Error e = error_of([&] { write_preview(missing, img, {}); });
  CHECK(e.kind() == ErrorKind::output);
  CHECK(e.exit_code() == 4);
  CHECK_THAT(e.what(), Catch::Contains(missing) && Catch::Contains("does not exist"));
  const std::string bad_ext = dir / "p.unknownformat";
  const Error e2 = error_of([&] { write_preview(bad_ext, img, {}); });
  CHECK(e2.kind() == ErrorKind::output);
  CHECK_THAT(e2.what(), Catch::Contains(bad_ext));
  const Error e3 = error_of([&] {
    write_curve_plot(missing, std::vector<double>{1, 2}, std::vector<double>{1, 2}, "x", "y");
  });
  CHECK(e3.kind() == ErrorKind::output);
  CHECK(error_of([&] { write_preview(dir / "e.png", Image<float>(), {}); }).kind() == ErrorKind::internal);
}

TEST_CASE("a title too long for the image is shortened, not overflowing") {
  TempDir dir("title");
  PreviewOptions o;
  o.title = std::string(300, 'W');
  const PreviewLayout L = write_preview(dir / "t.png", ramp(100, 100, 0, 1), o);
  PreviewOptions plain;
  plain.title = "short";
  const PreviewLayout P = write_preview(dir / "s.png", ramp(100, 100, 0, 1), plain);
  CHECK(L.canvas_width == P.canvas_width);
  const cv::Mat png = cv::imread(dir / "t.png");
  // the right margin of the title band stays paper white
  for (int y = 0; y < L.image_y; ++y) CHECK(pixel(png, y, L.canvas_width - 3) == Rgb{255, 255, 255});
}

TEST_CASE("a very flat image still gets a colour bar tall enough for its labels") {
  TempDir dir("flat");
  PreviewOptions o;
  o.units = "nm";
  const PreviewLayout L = write_preview(dir / "flat.png", ramp(20, 1000, 0, 100), o);
  CHECK(L.image_height == 20);
  CHECK(L.bar_height >= 3 * 20); // at least three label rows
  CHECK(L.canvas_height > L.bar_y + L.bar_height);
}

TEST_CASE("the scale bar is left out when it or its label does not fit the image") {
  TempDir dir("narrow");
  PreviewOptions o;
  o.pixel_pitch_m = 0.5e-6;
  const PreviewLayout tall = write_preview(dir / "tall.png", ramp(1000, 40, 0, 1), o);
  CHECK_FALSE(tall.has_scale_bar);
  const PreviewLayout wide = write_preview(dir / "wide.png", ramp(400, 400, 0, 1), o);
  CHECK(wide.has_scale_bar);
  CHECK(wide.scale_bar_m == Approx(50e-6)); // 200 um wide field: a fifth is 40 um -> 50 um
}
