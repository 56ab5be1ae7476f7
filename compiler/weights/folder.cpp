// A folder of .npy files, one tensor each, named after the file's stem.
#include "formats.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <filesystem>
#include <system_error>

namespace meander::weights {

namespace fs = std::filesystem;

// The .npy files of a folder, sorted by file name (bytewise) for determinism.
std::optional<std::vector<std::string>> npy_files_in(const std::string& folder, Diagnostics& diags) {
    std::error_code ec;
    std::vector<std::string> names;
    fs::directory_iterator it(folder, ec), end;
    for (; !ec && it != end; it.increment(ec)) {
        std::string stem;
        std::error_code fec;
        if (it->is_regular_file(fec) && npy_stem(it->path().filename().string(), stem))
            names.push_back(it->path().filename().string());
    }
    if (ec) {
        diags.error(folder, fmt::format("cannot read folder: {}", ec.message()));
        return std::nullopt;
    }
    std::sort(names.begin(), names.end());
    return names;
}

std::optional<TensorSet> read_npy_folder_files(const std::string& path,
                                               const std::vector<std::pair<std::string, std::string>>& files,
                                               Diagnostics& diags, const WeightsLimit& limit) {
    if (files.empty()) {
        diags.error(path, "no .npy files in this folder");
        return std::nullopt;
    }
    std::uint64_t total = 0;
    for (const auto& f : files) total += f.second.size();
    if (!file_within_limit(total, path, limit, diags)) return std::nullopt;
    TensorSet set;
    set.path = path;
    bool ok = true;
    for (const auto& [file, bytes] : files) {
        std::string full = (fs::path(path) / file).string();
        std::string stem, error;
        npy_stem(file, stem);
        auto t = parse_npy(bytes, stem, error);
        if (!t) {
            diags.error(full, error);
            ok = false;
            continue;
        }
        set.tensors.push_back(std::move(*t));
    }
    if (!ok) return std::nullopt;
    return set;
}

}  // namespace meander::weights
