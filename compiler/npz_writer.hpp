// Writes a tensor set as NumPy .npz bytes (a zip of NAME.npy members, stored,
// NEP 1 format version 1.0, little-endian), for refit's output. Deterministic:
// members in set order, a fixed timestamp.
#pragma once

#include <optional>
#include <string>

#include "weights.hpp"

namespace meander {

// `dtype` "float32" or "float64" for every member; nullopt when libzip fails.
std::optional<std::string> npz_bytes(const TensorSet& set, const std::string& dtype);

}  // namespace meander
