// Reading a weights source: the shared helpers, the choice of format by the
// path, and the raw bytes that go into the content hash.
#include "formats.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>

#include <cstring>
#include <filesystem>
#include <limits>
#include <system_error>

namespace meander {

const Tensor* TensorSet::find(const std::string& name) const {
    for (const auto& t : tensors)
        if (t.name == name) return &t;
    return nullptr;
}

namespace weights {

namespace fs = std::filesystem;

// Python's spelling of a shape: (), (16,), (16, 6).
std::string shape_text(const std::vector<std::size_t>& shape) {
    if (shape.size() == 1) return fmt::format("({},)", shape[0]);
    return fmt::format("({})", fmt::join(shape, ", "));
}

// Element count, or nullopt when the product overflows.
std::optional<std::size_t> element_count(const std::vector<std::size_t>& shape) {
    std::size_t n = 1;
    for (std::size_t d : shape) {
        if (d != 0 && n > std::numeric_limits<std::size_t>::max() / d) return std::nullopt;
        n *= d;
    }
    return n;
}

std::string lower(std::string s) {
    for (char& c : s)
        if (c >= 'A' && c <= 'Z') c = static_cast<char>(c - 'A' + 'a');
    return s;
}

bool host_is_little() {
    const std::uint16_t one = 1;
    unsigned char b[2];
    std::memcpy(b, &one, 2);
    return b[0] == 1;
}

std::uint64_t read_le(std::string_view b, std::size_t at, std::size_t n) {
    std::uint64_t v = 0;
    for (std::size_t i = 0; i < n; ++i) v |= static_cast<std::uint64_t>(static_cast<unsigned char>(b[at + i])) << (8 * i);
    return v;
}

}  // namespace weights

using namespace weights;

namespace {

namespace fs = std::filesystem;

std::optional<TensorSet> read_npy_file(const std::string& path, Diagnostics& diags) {
    auto bytes = read_file(path, diags);
    if (!bytes) return std::nullopt;
    return read_npy_bytes(*bytes, path, diags);
}

std::optional<TensorSet> read_npy_folder(const std::string& path, Diagnostics& diags) {
    auto names = npy_files_in(path, diags);
    if (!names) return std::nullopt;
    std::vector<std::pair<std::string, std::string>> files;
    bool ok = true;
    for (const auto& file : *names) {
        auto bytes = read_file((fs::path(path) / file).string(), diags);
        if (!bytes) { ok = false; continue; }
        files.emplace_back(file, std::move(*bytes));
    }
    auto set = read_npy_folder_files(path, files, diags);
    if (!ok) return std::nullopt;
    return set;
}

std::optional<TensorSet> read_npz(const std::string& path, Diagnostics& diags) {
    auto bytes = read_file(path, diags);
    if (!bytes) return std::nullopt;
    return read_npz_bytes(*bytes, path, diags);
}

std::optional<TensorSet> read_listing(const std::string& path, Diagnostics& diags) {
    auto text = read_file(path, diags);
    if (!text) return std::nullopt;
    return read_listing_bytes(std::move(*text), path, diags);
}

}  // namespace

std::optional<TensorSet> read_weights(const std::string& path, Diagnostics& diags, const std::string& key_path) {
    std::string ext = lower(fs::path(path).extension().string());
    if (ext == ".pt" || ext == ".pth") {
        auto bytes = read_file(path, diags);
        if (!bytes) return std::nullopt;
        return read_checkpoint_bytes(*bytes, path, key_path, diags);
    }
    if (!key_path.empty()) {
        diags.error(path, fmt::format("a key path ('{}') selects a dictionary in a PyTorch checkpoint (.pt, .pth); this file is not one", key_path));
        return std::nullopt;
    }
    if (ext == ".safetensors") {
        auto bytes = read_file(path, diags);
        if (!bytes) return std::nullopt;
        return read_safetensors_bytes(*bytes, path, diags);
    }
    std::error_code ec;
    if (fs::is_directory(path, ec)) return read_npy_folder(path, diags);
    if (ext == ".npz") return read_npz(path, diags);
    if (ext == ".npy") return read_npy_file(path, diags);
    if (ext == ".mnw") return read_listing(path, diags);
    diags.error(path, fmt::format("unknown weights format '{}': expected .npz, .npy, .mnw, .pt, .pth, .safetensors or a folder of .npy files",
                                  ext.empty() ? "(no extension)" : ext));
    return std::nullopt;
}

std::optional<std::string> weights_bytes(const std::string& path, Diagnostics& diags) {
    std::error_code ec;
    if (!fs::is_directory(path, ec)) {
        auto bytes = read_file(path, diags);
        // A weight listing is text: a checkout with CRLF line endings holds the same weights.
        if (bytes && lower(fs::path(path).extension().string()) == ".mnw") *bytes = normalise_line_endings(*bytes);
        return bytes;
    }
    auto names = npy_files_in(path, diags);
    if (!names) return std::nullopt;
    // Name and length before each file's bytes, so no two folders hash alike.
    std::string out;
    for (const auto& file : *names) {
        auto bytes = read_file((fs::path(path) / file).string(), diags);
        if (!bytes) return std::nullopt;
        out += fmt::format("{}\n{}\n", file, bytes->size());
        out += *bytes;
    }
    return out;
}

}  // namespace meander
