// The tune report as a picture: per continuous block, deviation (or, with
// labels and --metric-slack, the held-out task metric) against field
// evaluations per inference at worst, both on log scales, one series per
// method, the deployed and the recommended budget marked. Plain SVG 1.1 that
// a browser shows as it is; every candidate is one element of class
// "candidate" with its solver line as a title.
#pragma once

#include <string>

#include "tune.hpp"

namespace meander {

std::string render_tune_svg(const TuneReport& report);

}  // namespace meander
