// .npz: a zip archive of NAME.npy members (numpy.savez stores them,
// numpy.savez_compressed deflates them), read through libzip.
#include "formats.hpp"

#include <fmt/format.h>

#include "zip.hpp"

namespace meander::weights {

std::optional<TensorSet> read_npz_bytes(std::string_view bytes, const std::string& path, Diagnostics& diags) {
    ZipArchive ar;
    std::string problem;
    if (!open_zip(bytes, ar, problem)) {
        diags.error(path, fmt::format("cannot open the .npz archive: {}", problem));
        return std::nullopt;
    }

    TensorSet set;
    set.path = path;
    bool ok = true;
    zip_int64_t n = zip_get_num_entries(ar.za, 0);
    for (zip_int64_t i = 0; i < n; ++i) {
        auto index = static_cast<zip_uint64_t>(i);
        zip_stat_t st;
        zip_stat_init(&st);
        if (zip_stat_index(ar.za, index, 0, &st) != 0 || !(st.valid & ZIP_STAT_NAME)) {
            diags.error(path, fmt::format("member {} of the archive is unreadable", i + 1));
            ok = false;
            continue;
        }
        std::string member = st.name;
        if (!member.empty() && member.back() == '/') continue;  // a folder entry
        std::string stem;
        if (!npy_stem(member, stem)) {
            diags.error(path, fmt::format("member '{}' is not a .npy array (an .npz holds NAME.npy members)", member));
            ok = false;
            continue;
        }
        if (set.find(stem)) {
            diags.error(path, fmt::format("member '{}' appears twice", member));
            ok = false;
            continue;
        }
        std::string error;
        auto data = read_member(ar.za, index, st, error);
        std::optional<Tensor> t;
        if (data) t = parse_npy(*data, stem, error);
        if (!t) {
            diags.error(path, fmt::format("member '{}': {}", member, error));
            ok = false;
            continue;
        }
        set.tensors.push_back(std::move(*t));
    }
    if (!ok) return std::nullopt;
    if (set.tensors.empty()) {
        diags.error(path, "the .npz archive holds no .npy arrays");
        return std::nullopt;
    }
    return set;
}

}  // namespace meander::weights
