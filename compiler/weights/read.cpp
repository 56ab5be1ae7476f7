// Reading a weights source: the shared helpers, the choice of format by the
// path, and the raw bytes that go into the content hash.
#include "formats.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>

#include <algorithm>
#include <charconv>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
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

bool file_within_limit(std::uint64_t size, const std::string& path, const WeightsLimit& limit, Diagnostics& diags) {
    if (size <= limit.bytes) return true;
    diags.error(path, fmt::format("{} bytes of weights{}; nothing was read", size, beyond_limit(limit)));
    return false;
}

std::string beyond_limit(const WeightsLimit& limit) {
    return fmt::format(", beyond the limit of {} bytes ({})", limit.bytes, limit.basis);
}

}  // namespace weights

using namespace weights;

std::uint64_t bound_values(const Model& model) {
    // Checked widths keep this far below the cap; it guards unchecked models
    // (each term is below 2^63, and the cap times 8 * kWeightsSlack fits 64 bits).
    constexpr std::uint64_t cap = std::uint64_t{1} << 56;
    std::uint64_t n = 0;
    for_each_model_dense(model, [&](const Dense& d) {
        const auto out = static_cast<std::uint64_t>(std::max(d.out, 0));
        const std::uint64_t layer = out * static_cast<std::uint64_t>(std::max(d.in_total(), 0)) + (d.has_bias ? out : 0);
        n = layer > cap - n ? cap : n + layer;
    });
    return n;
}

std::optional<WeightsLimit> weights_limit(const Model* model, Diagnostics& diags) {
    WeightsLimit limit;
    if (const char* set = std::getenv(kWeightsLimitVariable)) {
        const std::string_view text(set);
        std::uint64_t mib = 0;
        auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), mib);
        if (ec != std::errc() || end != text.data() + text.size() || mib < 1 || mib > (std::uint64_t{1} << 20)) {
            diags.error(kWeightsLimitVariable, fmt::format("the environment variable is '{}': expected a whole number of "
                                                           "MiB from 1 to 1048576", text));
            return std::nullopt;
        }
        limit.bytes = mib << 20;
        limit.basis = fmt::format("{}={}", kWeightsLimitVariable, mib);
        return limit;
    }
    if (!model) return limit;
    const std::uint64_t values = bound_values(*model);
    const std::uint64_t need = values * 8 * kWeightsSlack + kWeightsAllowance;
    if (need >= limit.bytes) return limit;
    limit.bytes = need;
    limit.basis = fmt::format("what model '{}' binds: {} values, 8 bytes each, times {}, plus {} MiB; set {} to raise it",
                              model->name, values, kWeightsSlack, kWeightsAllowance >> 20, kWeightsLimitVariable);
    return limit;
}

namespace {

namespace fs = std::filesystem;

// Bytes a file or a folder's .npy files hold, or 0 when that cannot be told
// (the read that follows then says why).
std::uint64_t size_on_disk(const std::string& path, const std::vector<std::string>* files = nullptr) {
    std::error_code ec;
    if (!files) {
        const auto n = fs::file_size(path, ec);
        return ec ? 0 : n;
    }
    std::uint64_t total = 0;
    for (const auto& file : *files) {
        const auto n = fs::file_size(fs::path(path) / file, ec);
        if (!ec) total += n;
    }
    return total;
}

// A file's bytes, refused unread when its size is past the limit; a file
// whose size cannot be told beforehand (a pipe, a device) is read only up to it.
std::optional<std::string> read_within(const std::string& path, const WeightsLimit& limit, Diagnostics& diags) {
    if (!file_within_limit(size_on_disk(path), path, limit, diags)) return std::nullopt;
    std::error_code ec;
    if (fs::is_regular_file(path, ec) || fs::is_directory(path, ec)) return read_file(path, diags);
    std::ifstream in(path, std::ios::binary);
    if (!in) return read_file(path, diags);  // says why it cannot be opened
    std::string out;
    char buf[1 << 15];
    while (in.read(buf, sizeof buf) || in.gcount() > 0) {
        out.append(buf, static_cast<std::size_t>(in.gcount()));
        if (out.size() > limit.bytes) {
            diags.error(path, fmt::format("reading stopped after {} bytes{}", out.size(), beyond_limit(limit)));
            return std::nullopt;
        }
    }
    if (in.bad()) {
        diags.error(path, "cannot read file: read failed");
        return std::nullopt;
    }
    return out;
}

std::optional<TensorSet> read_npy_folder(const std::string& path, const WeightsLimit& limit, Diagnostics& diags) {
    auto names = npy_files_in(path, diags);
    if (!names) return std::nullopt;
    if (!file_within_limit(size_on_disk(path, &*names), path, limit, diags)) return std::nullopt;
    std::vector<std::pair<std::string, std::string>> files;
    bool ok = true;
    for (const auto& file : *names) {
        auto bytes = read_file((fs::path(path) / file).string(), diags);
        if (!bytes) { ok = false; continue; }
        files.emplace_back(file, std::move(*bytes));
    }
    auto set = read_npy_folder_files(path, files, diags, limit);
    if (!ok) return std::nullopt;
    return set;
}

}  // namespace

std::optional<TensorSet> read_weights(const std::string& path, Diagnostics& diags, const std::string& key_path,
                                      const Model* model) {
    const auto limit = weights_limit(model, diags);
    if (!limit) return std::nullopt;
    std::string ext = lower(fs::path(path).extension().string());
    if (ext == ".pt" || ext == ".pth") {
        auto bytes = read_within(path, *limit, diags);
        if (!bytes) return std::nullopt;
        return read_checkpoint_bytes(*bytes, path, key_path, diags, *limit);
    }
    if (!key_path.empty()) {
        diags.error(path, fmt::format("a key path ('{}') selects a dictionary in a PyTorch checkpoint (.pt, .pth); this file is not one", key_path));
        return std::nullopt;
    }
    std::error_code ec;
    if (ext != ".safetensors" && fs::is_directory(path, ec)) return read_npy_folder(path, *limit, diags);
    if (ext == ".safetensors" || ext == ".npz" || ext == ".npy" || ext == ".mnw") {
        auto bytes = read_within(path, *limit, diags);
        if (!bytes) return std::nullopt;
        if (ext == ".safetensors") return read_safetensors_bytes(*bytes, path, diags, *limit);
        if (ext == ".npz") return read_npz_bytes(*bytes, path, diags, *limit);
        if (ext == ".npy") return read_npy_bytes(*bytes, path, diags, *limit);
        return read_listing_bytes(std::move(*bytes), path, diags, *limit);
    }
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
