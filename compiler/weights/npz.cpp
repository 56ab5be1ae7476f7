// .npz: a zip archive of NAME.npy members (numpy.savez stores them,
// numpy.savez_compressed deflates them), read through libzip.
#include "formats.hpp"

#include <fmt/format.h>

#include <unordered_set>

#include "zip.hpp"

namespace meander::weights {

namespace {

struct Member {
    zip_uint64_t index = 0;
    zip_stat_t st{};
    std::string name;
    std::string stem;
};

}  // namespace

std::optional<TensorSet> read_npz_bytes(std::string_view bytes, const std::string& path, Diagnostics& diags,
                                        const WeightsLimit& limit) {
    if (!file_within_limit(bytes.size(), path, limit, diags)) return std::nullopt;
    ZipArchive ar;
    std::string problem;
    if (!open_zip(bytes, ar, problem)) {
        diags.error(path, fmt::format("cannot open the .npz archive: {}", problem));
        return std::nullopt;
    }

    // The directory first: names, and the inflated sizes summed against the
    // limit, so an archive that would pass it is refused before anything is inflated.
    std::vector<Member> members;
    std::unordered_set<std::string> stems;
    bool ok = true;
    zip_uint64_t total = 0;
    zip_int64_t n = zip_get_num_entries(ar.za, 0);
    for (zip_int64_t i = 0; i < n; ++i) {
        Member m;
        m.index = static_cast<zip_uint64_t>(i);
        zip_stat_init(&m.st);
        if (zip_stat_index(ar.za, m.index, 0, &m.st) != 0 || !(m.st.valid & ZIP_STAT_NAME)) {
            diags.error(path, fmt::format("member {} of the archive is unreadable", i + 1));
            ok = false;
            continue;
        }
        m.name = m.st.name;
        if (!m.name.empty() && m.name.back() == '/') continue;  // a folder entry
        if (!npy_stem(m.name, m.stem)) {
            diags.error(path, fmt::format("member '{}' is not a .npy array (an .npz holds NAME.npy members)", m.name));
            ok = false;
            continue;
        }
        if (!stems.insert(m.stem).second) {
            diags.error(path, fmt::format("member '{}' appears twice", m.name));
            ok = false;
            continue;
        }
        const zip_uint64_t size = declared_size(m.st);
        if (size > limit.bytes - total) {
            diags.error(path, fmt::format("member '{}' would bring the archive's inflated size to {} bytes{}; "
                                          "nothing was inflated",
                                          m.name, total + size, beyond_limit(limit)));
            return std::nullopt;
        }
        total += size;
        members.push_back(std::move(m));
    }

    TensorSet set;
    set.path = path;
    zip_uint64_t inflated = 0;
    for (auto& m : members) {
        std::string error;
        auto data = read_member(ar.za, m.index, m.st, limit.bytes - inflated, error);
        std::optional<Tensor> t;
        if (data) {
            inflated += data->size();
            t = parse_npy(*data, m.stem, error);
        }
        if (!t) {
            diags.error(path, fmt::format("member '{}': {}", m.name, error));
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
