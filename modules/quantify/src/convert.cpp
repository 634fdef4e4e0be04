#include "wavestack/quantify/convert.hpp"

#include "wavestack/core/error.hpp"

#include <cmath>
#include <string>

namespace wavestack::quantify {
namespace {

void scale_image(ImageView<const float> in, ImageView<float> out, double s) {
  if (in.height() != out.height() || in.width() != out.width())
    fail_config("phase conversion: input is " + std::to_string(in.height()) + "x" + std::to_string(in.width()) +
                ", output " + std::to_string(out.height()) + "x" + std::to_string(out.width()));
  for (std::size_t y = 0; y < in.height(); ++y) {
    const float* a = in.row(y);
    float* b = out.row(y);
    for (std::size_t x = 0; x < in.width(); ++x) b[x] = static_cast<float>(s * static_cast<double>(a[x]));
  }
}

void check_dn(double dn) {
  if (!(dn != 0) || !std::isfinite(dn))
    fail_config("height in transmission needs a finite, non-zero index difference (object minus medium)");
}

} // namespace

double nm_per_radian(double wavelength) {
  if (!(wavelength > 0) || !std::isfinite(wavelength))
    fail_config("OPD needs the vacuum wavelength (a positive length)");
  return wavelength * 1e9 / (2.0 * M_PI);
}

PhaseConverter::PhaseConverter(ConversionOptions o) : opt_(o), scale_(nm_per_radian(o.wavelength)) {
  switch (o.quantity) {
  case Quantity::opd: break;
  case Quantity::height_transmission:
    check_dn(o.index_difference);
    scale_ /= o.index_difference;
    break;
  case Quantity::height_reflection: scale_ *= (o.toward_objective ? -0.5 : 0.5); break;
  }
}

void PhaseConverter::apply(ImageView<const float> phase, ImageView<float> out) const {
  scale_image(phase, out, scale_);
}

void opd_to_height_transmission(ImageView<const float> opd_nm, double dn, ImageView<float> out) {
  check_dn(dn);
  scale_image(opd_nm, out, 1.0 / dn);
}

void opd_to_height_reflection(ImageView<const float> opd_nm, ImageView<float> out, bool toward_objective) {
  scale_image(opd_nm, out, toward_objective ? -0.5 : 0.5);
}

} // namespace wavestack::quantify
