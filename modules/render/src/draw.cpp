#include "draw.hpp"

#include "wavestack/core/error.hpp"

#include <opencv2/imgcodecs.hpp>
#include <opencv2/imgproc.hpp>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <vector>

namespace wavestack::render::detail {

namespace {

constexpr int face = cv::FONT_HERSHEY_SIMPLEX;

enum class Kind { ascii, micro, pi, unknown };
struct Token {
  Kind kind;
  std::string text; ///< for ascii runs
};

/// Split UTF-8 into ASCII runs and the few symbols drawn by hand. "−"
/// (U+2212) becomes '-'; other non-ASCII characters become '?'.
std::vector<Token> tokenize(const std::string& s) {
  std::vector<Token> out;
  auto ascii = [&](char c) {
    if (out.empty() || out.back().kind != Kind::ascii) out.push_back({Kind::ascii, {}});
    out.back().text += c;
  };
  for (std::size_t i = 0; i < s.size();) {
    const auto c = static_cast<unsigned char>(s[i]);
    if (c < 0x80) {
      ascii(c >= 0x20 ? static_cast<char>(c) : ' ');
      ++i;
      continue;
    }
    std::size_t len = (c >> 5) == 0x6 ? 2 : (c >> 4) == 0xE ? 3 : (c >> 3) == 0x1E ? 4 : 1;
    len = std::min(len, s.size() - i);
    const std::string cp = s.substr(i, len);
    if (cp == "\xC2\xB5" || cp == "\xCE\xBC") out.push_back({Kind::micro, {}});
    else if (cp == "\xCF\x80") out.push_back({Kind::pi, {}});
    else if (cp == "\xE2\x88\x92") ascii('-');
    else ascii('?');
    i += len;
  }
  return out;
}

int ascii_width(const std::string& s, const Font& f) {
  int base = 0;
  return cv::getTextSize(s, face, f.scale, f.thickness, &base).width;
}

int cap_height(const Font& f) {
  int base = 0;
  return cv::getTextSize("H", face, f.scale, f.thickness, &base).height;
}

int token_width(const Token& t, const Font& f) {
  switch (t.kind) {
  case Kind::ascii: return ascii_width(t.text, f);
  case Kind::micro: return ascii_width("u", f);
  case Kind::pi: return ascii_width("n", f);
  case Kind::unknown: return ascii_width("?", f);
  }
  return 0;
}

/// Column of the left stem of "u" relative to its origin: found by drawing
/// it, so it follows the font at any scale.
int u_stem_offset(const Font& f) {
  const int w = ascii_width("u", f) + 4, h = cap_height(f) + 8;
  cv::Mat m(h, w, CV_8UC1, cv::Scalar(0));
  cv::putText(m, "u", {0, h - 4}, face, f.scale, cv::Scalar(255), f.thickness, cv::LINE_8);
  for (int x = 0; x < w; ++x)
    for (int y = 0; y < h; ++y)
      if (m.at<std::uint8_t>(y, x) > 0) return x + f.thickness / 2;
  return w / 4;
}

void draw_micro(cv::Mat& c, cv::Point o, const Font& f, const cv::Scalar& col, int extra) {
  cv::putText(c, "u", o, face, f.scale, col, f.thickness + extra, cv::LINE_AA);
  const int x = o.x + u_stem_offset(f);
  const int descent = std::max(2, static_cast<int>(std::lround(0.32 * cap_height(f))));
  cv::line(c, {x, o.y - 1}, {x, o.y + descent}, col, f.thickness + extra, cv::LINE_AA);
}

void draw_pi(cv::Mat& c, cv::Point o, const Font& f, const cv::Scalar& col, int extra) {
  const int w = ascii_width("n", f);
  const int top = o.y - static_cast<int>(std::lround(0.64 * cap_height(f))); // x-height of the font
  const int t = f.thickness + extra;
  const int l = o.x + static_cast<int>(std::lround(0.12 * w)), r = o.x + static_cast<int>(std::lround(0.88 * w));
  const int left_leg = o.x + static_cast<int>(std::lround(0.32 * w));
  const int right_leg = o.x + static_cast<int>(std::lround(0.68 * w));
  cv::line(c, {l, top}, {r, top}, col, t, cv::LINE_AA);
  cv::line(c, {left_leg, top}, {left_leg - std::max(1, w / 10), o.y}, col, t, cv::LINE_AA);
  cv::line(c, {right_leg, top}, {right_leg, o.y - std::max(1, w / 10)}, col, t, cv::LINE_AA);
  cv::line(c, {right_leg, o.y - std::max(1, w / 10)}, {right_leg + std::max(1, w / 8), o.y}, col, t, cv::LINE_AA);
}

/// The Hershey '-' carries wide side bearings; pull a following hand-drawn
/// symbol closer so "-π" reads as one number.
int kern(const std::vector<Token>& tokens, std::size_t i, const Font& f) {
  if (i == 0 || tokens[i].kind == Kind::ascii) return 0;
  const Token& prev = tokens[i - 1];
  if (prev.kind == Kind::ascii && !prev.text.empty() && prev.text.back() == '-') return ascii_width("n", f) / 3;
  return 0;
}

void draw_tokens(cv::Mat& c, const std::vector<Token>& tokens, cv::Point o, const Font& f, const cv::Scalar& col,
                 int extra) {
  for (std::size_t i = 0; i < tokens.size(); ++i) {
    const Token& t = tokens[i];
    o.x -= kern(tokens, i, f);
    switch (t.kind) {
    case Kind::ascii: cv::putText(c, t.text, o, face, f.scale, col, f.thickness + extra, cv::LINE_AA); break;
    case Kind::micro: draw_micro(c, o, f, col, extra); break;
    case Kind::pi: draw_pi(c, o, f, col, extra); break;
    case Kind::unknown: cv::putText(c, "?", o, face, f.scale, col, f.thickness + extra, cv::LINE_AA); break;
    }
    o.x += token_width(t, f);
  }
}

std::string join(const std::vector<Token>& tokens) {
  std::string s;
  for (const auto& t : tokens) {
    switch (t.kind) {
    case Kind::ascii: s += t.text; break;
    case Kind::micro: s += "\xC2\xB5"; break;
    case Kind::pi: s += "\xCF\x80"; break;
    case Kind::unknown: s += "?"; break;
    }
  }
  return s;
}

} // namespace

cv::Size text_size(const std::string& utf8, const Font& font) {
  int w = 0;
  const auto tokens = tokenize(utf8);
  for (std::size_t i = 0; i < tokens.size(); ++i) w += token_width(tokens[i], font) - kern(tokens, i, font);
  return {w, cap_height(font)};
}

void draw_text(cv::Mat& canvas, const std::string& utf8, cv::Point origin, const Font& font, const cv::Scalar& colour) {
  draw_tokens(canvas, tokenize(utf8), origin, font, colour, 0);
}

void draw_outlined_text(cv::Mat& canvas, const std::string& utf8, cv::Point origin, const Font& font) {
  const auto tokens = tokenize(utf8);
  draw_tokens(canvas, tokens, origin, font, cv::Scalar(0, 0, 0), 2);
  draw_tokens(canvas, tokens, origin, font, cv::Scalar(255, 255, 255), 0);
}

std::string fit_text(const std::string& utf8, int width, Font& font, double min_scale) {
  while (text_size(utf8, font).width > width && font.scale > min_scale + 1e-9)
    font.scale = std::max(min_scale, font.scale - 0.05);
  if (text_size(utf8, font).width <= width) return utf8;
  // split ASCII runs into single characters so the text can shrink one at a time
  std::vector<Token> chars;
  for (const auto& t : tokenize(utf8)) {
    if (t.kind != Kind::ascii) chars.push_back(t);
    else
      for (char c : t.text) chars.push_back({Kind::ascii, std::string(1, c)});
  }
  while (!chars.empty()) {
    chars.pop_back();
    const std::string s = join(chars) + "...";
    if (text_size(s, font).width <= width) return s;
  }
  return "";
}

void draw_vertical_text(cv::Mat& canvas, const std::string& utf8, cv::Point bottom_left, const Font& font,
                        const cv::Scalar& colour) {
  const cv::Size size = text_size(utf8, font);
  const int descent = static_cast<int>(std::lround(0.4 * size.height)) + font.thickness;
  const int pad = 2;
  cv::Mat alpha(size.height + descent + 2 * pad, size.width + 2 * pad, CV_8UC1, cv::Scalar(0));
  draw_tokens(alpha, tokenize(utf8), {pad, pad + size.height}, font, cv::Scalar(255), 0);
  cv::Mat rotated;
  cv::rotate(alpha, rotated, cv::ROTATE_90_COUNTERCLOCKWISE);
  // the rotated text's top-left: bottom end at bottom_left, baseline becomes the right edge
  const int x0 = bottom_left.x - (pad + size.height);
  const int y0 = bottom_left.y - rotated.rows + pad;
  for (int y = 0; y < rotated.rows; ++y) {
    const int cy = y0 + y;
    if (cy < 0 || cy >= canvas.rows) continue;
    for (int x = 0; x < rotated.cols; ++x) {
      const int cx = x0 + x;
      if (cx < 0 || cx >= canvas.cols) continue;
      const double a = rotated.at<std::uint8_t>(y, x) / 255.0;
      if (a <= 0) continue;
      auto& px = canvas.at<cv::Vec3b>(cy, cx);
      for (int k = 0; k < 3; ++k) px[k] = cv::saturate_cast<std::uint8_t>(px[k] * (1 - a) + colour[k] * a);
    }
  }
}

void write_png(const std::string& path, const cv::Mat& bgr) {
  ErrorContext ctx;
  ctx.file = path;
  std::filesystem::path parent = std::filesystem::path(path).parent_path();
  std::error_code ec;
  if (!parent.empty() && !std::filesystem::is_directory(parent, ec))
    fail_output("cannot write the preview image: the folder '" + parent.string() + "' does not exist", ctx);
  bool ok = false;
  std::string why;
  try {
    ok = cv::imwrite(path, bgr, {cv::IMWRITE_PNG_COMPRESSION, 6});
  } catch (const cv::Exception& e) {
    why = e.what();
  }
  if (!ok)
    fail_output("cannot write the preview image" + (why.empty() ? std::string() : " (" + why + ")"), ctx);
}

} // namespace wavestack::render::detail
