// The weight file formats, each with an entry point that reads bytes already
// in memory (the file-reading wrappers in read.cpp call them, and so can a
// fuzzer), and the helpers they share.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "../weights.hpp"

namespace meander::weights {

constexpr std::size_t max_rank = 4;

// Python's spelling of a shape: (), (16,), (16, 6).
std::string shape_text(const std::vector<std::size_t>& shape);
// Element count, or nullopt when the product overflows.
std::optional<std::size_t> element_count(const std::vector<std::size_t>& shape);
std::string lower(std::string s);
bool host_is_little();
// Unsigned little-endian integer of `n` bytes at `at`.
std::uint64_t read_le(std::string_view b, std::size_t at, std::size_t n);

// Element types of the framework formats (elements.cpp).
struct ElementType {
    enum class Kind { ieee, half, bfloat, signed_int, unsigned_int };
    const char* safetensors;    // "F32"
    const char* storage;        // PyTorch's storage class: "FloatStorage"
    const char* name;           // Tensor::dtype: "float32"
    std::size_t bytes;
    Kind kind;
};
// By the safetensors spelling or the PyTorch storage class name; null if unknown.
const ElementType* element_type(std::string_view spelling);
std::string element_type_list();
// Reads `shape` elements from `storage` starting at element `offset` with
// `strides` in elements (empty: C order), widening each to double exactly.
// Checks that every element lies inside the storage before reading.
bool decode_elements(const ElementType& type, std::string_view storage, std::size_t offset,
                     const std::vector<std::size_t>& shape, const std::vector<std::size_t>& strides, bool little,
                     std::vector<double>& out, std::string& error);

// Every entry point below refuses input past `limit` (weights.hpp): bytes
// longer than it, or archive members that would inflate past it.
// True when `size` bytes of `path` are within the limit; else an error.
bool file_within_limit(std::uint64_t size, const std::string& path, const WeightsLimit& limit, Diagnostics& diags);
// ", beyond the limit of N bytes (BASIS); set VARIABLE ... to raise it" for messages.
std::string beyond_limit(const WeightsLimit& limit);

// safetensors (safetensors.cpp): the file's bytes; `path` names it in messages.
std::optional<TensorSet> read_safetensors_bytes(std::string_view bytes, const std::string& path, Diagnostics& diags,
                                                const WeightsLimit& limit = {});

// PyTorch checkpoints written by torch.save (checkpoint.cpp): the zip's bytes;
// `key_path` ("model/state_dict", empty for the top level) selects a nested
// dictionary of tensors. The limit is on the file's bytes and on the inflated
// total of the members read (the pickle and the storages it names).
std::optional<TensorSet> read_checkpoint_bytes(std::string_view bytes, const std::string& path,
                                               const std::string& key_path, Diagnostics& diags,
                                               const WeightsLimit& limit = {});

// .npy (npy.cpp): one whole .npy image; on failure returns nullopt and sets `error`.
std::optional<Tensor> parse_npy(std::string_view bytes, std::string name, std::string& error);
// Name of a tensor stored as "STEM.npy" (case of the suffix ignored).
bool npy_stem(const std::string& file, std::string& stem);
// A .npy file's bytes as a set of one tensor named after the stem of `path`.
std::optional<TensorSet> read_npy_bytes(std::string_view bytes, const std::string& path, Diagnostics& diags,
                                        const WeightsLimit& limit = {});

// A folder of .npy files (folder.cpp): `files` holds (file name, bytes) pairs
// in name order; `path` is the folder, for messages. The limit is on their total.
std::optional<TensorSet> read_npy_folder_files(const std::string& path,
                                               const std::vector<std::pair<std::string, std::string>>& files,
                                               Diagnostics& diags, const WeightsLimit& limit = {});
// The .npy files of a folder, sorted by file name (bytewise) for determinism.
std::optional<std::vector<std::string>> npy_files_in(const std::string& folder, Diagnostics& diags);

// .npz (npz.cpp): the archive's bytes; `path` names it in messages.
// The limit is on the archive's bytes and on its members' inflated total.
std::optional<TensorSet> read_npz_bytes(std::string_view bytes, const std::string& path, Diagnostics& diags,
                                        const WeightsLimit& limit = {});

// Weight listing (listing.cpp): the listing's text; `path` names it in messages.
std::optional<TensorSet> read_listing_bytes(std::string text, const std::string& path, Diagnostics& diags,
                                            const WeightsLimit& limit = {});

}  // namespace meander::weights
