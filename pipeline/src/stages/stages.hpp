#pragma once
// Factories of the built-in stages; the registry (registry.cpp) lists them.
#include "wavestack/pipeline/params.hpp"
#include "wavestack/pipeline/stage.hpp"

#include <memory>

namespace wavestack::pipeline::stages {

std::unique_ptr<Stage> make_fringe(Params& p);
std::unique_ptr<Stage> make_sideband(Params& p);
std::unique_ptr<Stage> make_propagate(Params& p);
std::unique_ptr<Stage> make_unwrap(Params& p);
std::unique_ptr<Stage> make_autofocus(Params& p);
std::unique_ptr<Stage> make_flatten(Params& p);
std::unique_ptr<Stage> make_reference(Params& p);
std::unique_ptr<Stage> make_zernike(Params& p);
std::unique_ptr<Stage> make_drymass(Params& p);

} // namespace wavestack::pipeline::stages
