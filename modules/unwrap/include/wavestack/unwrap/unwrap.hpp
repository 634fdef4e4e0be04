#pragma once
// The unwrap module in one include: reliability-sorting unwrapping
// (reliability.hpp), weighted and unweighted least squares by DCT
// (least_squares.hpp) with quality-map weights (quality.hpp), residues
// (residues.hpp), time-lapse continuity (continuity.hpp) and phase helpers
// (wrap.hpp). Conventions shared by all of them are in wrap.hpp.
#include "wavestack/unwrap/continuity.hpp"
#include "wavestack/unwrap/least_squares.hpp"
#include "wavestack/unwrap/quality.hpp"
#include "wavestack/unwrap/reliability.hpp"
#include "wavestack/unwrap/residues.hpp"
#include "wavestack/unwrap/wrap.hpp"
