// safetensors: an 8-byte little-endian header length N, N bytes of JSON
// (name -> {"dtype", "shape", "data_offsets": [begin, end]}, plus an optional
// "__metadata__" of strings), then the data buffer; offsets count from the
// start of the buffer and the tensors tile it exactly.
#include "formats.hpp"

#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include <algorithm>
#include <limits>

namespace meander::weights {

namespace {

using json = nlohmann::ordered_json;

struct Entry {
    std::string name;
    std::string dtype;            // as the file spells it: "F32"
    std::vector<std::size_t> shape;
    std::uint64_t begin = 0, end = 0;
};

// A non-negative integer that fits in 64 bits.
bool as_size(const json& j, std::uint64_t& out) {
    if (!j.is_number_unsigned()) return false;
    out = j.get<std::uint64_t>();
    return true;
}

}  // namespace

std::optional<TensorSet> read_safetensors_bytes(std::string_view bytes, const std::string& path, Diagnostics& diags,
                                                const WeightsLimit& limit) {
    auto fail = [&](std::string message) {
        diags.error(path, std::move(message));
        return std::nullopt;
    };
    if (!file_within_limit(bytes.size(), path, limit, diags)) return std::nullopt;
    if (bytes.size() < 8)
        return fail(fmt::format("not a safetensors file: {} bytes, shorter than the 8-byte header length", bytes.size()));
    const std::uint64_t header_len = read_le(bytes, 0, 8);
    const std::size_t after = bytes.size() - 8;
    if (header_len > after)
        return fail(fmt::format("safetensors header length {} runs past the end of the file ({} bytes follow it)", header_len, after));
    const std::string_view header = bytes.substr(8, static_cast<std::size_t>(header_len));
    const std::string_view data = bytes.substr(8 + static_cast<std::size_t>(header_len));

    json root;
    try {
        root = json::parse(header.begin(), header.end());
    } catch (const json::parse_error& e) {
        return fail(fmt::format("safetensors header is not JSON (byte {} of the header)", e.byte));
    } catch (const json::out_of_range&) {
        // A number literal beyond double's range (1e999): valid JSON text, unreadable here.
        return fail("safetensors header holds a number beyond the range of a double");
    }
    if (!root.is_object()) return fail("safetensors header is not a JSON object");

    std::vector<Entry> entries;
    for (const auto& item : root.items()) {
        // Named, not a structured binding: C++17 lambdas cannot capture those (clang refuses).
        const std::string& name = item.key();
        const json& v = item.value();
        if (name == "__metadata__") continue;  // free-form strings: nothing to bind
        auto bad = [&](const std::string& what) { return fail(fmt::format("tensor '{}': {}", name, what)); };
        if (!v.is_object()) return bad("its header entry is not an object");
        Entry e;
        e.name = name;
        if (!v.contains("dtype") || !v["dtype"].is_string()) return bad("no \"dtype\" string in its header entry");
        e.dtype = v["dtype"].get<std::string>();
        if (!v.contains("shape") || !v["shape"].is_array()) return bad("no \"shape\" list in its header entry");
        for (const auto& d : v["shape"]) {
            std::uint64_t n = 0;
            if (!as_size(d, n) || n > std::numeric_limits<std::size_t>::max())
                return bad(fmt::format("shape {} is not a list of non-negative integers", v["shape"].dump()));
            e.shape.push_back(static_cast<std::size_t>(n));
        }
        if (e.shape.size() > max_rank)
            return bad(fmt::format("shape {} has rank {}: at most {} dimensions are read", shape_text(e.shape), e.shape.size(), max_rank));
        const json* off = v.contains("data_offsets") ? &v["data_offsets"] : nullptr;
        if (!off || !off->is_array() || off->size() != 2 || !as_size((*off)[0], e.begin) || !as_size((*off)[1], e.end) || e.begin > e.end)
            return bad("\"data_offsets\" is not a pair [begin, end] with begin <= end");
        if (e.end > data.size())
            return bad(fmt::format("data_offsets [{}, {}] run past the data ({} bytes)", e.begin, e.end, data.size()));
        const ElementType* type = element_type(e.dtype);
        if (!type)
            return bad(fmt::format("unknown dtype '{}' (meander reads {})", e.dtype, element_type_list()));
        auto count = element_count(e.shape);
        if (!count || *count > std::numeric_limits<std::size_t>::max() / type->bytes)
            return bad(fmt::format("shape {} is too large", shape_text(e.shape)));
        if (*count * type->bytes != e.end - e.begin)
            return bad(fmt::format("shape {} of {} needs {} bytes, its data_offsets [{}, {}] hold {}", shape_text(e.shape),
                                   e.dtype, *count * type->bytes, e.begin, e.end, e.end - e.begin));
        entries.push_back(std::move(e));
    }

    // The tensors must tile the buffer: no overlap, no gap, nothing after.
    std::vector<const Entry*> by_offset;
    for (const auto& e : entries) by_offset.push_back(&e);
    std::stable_sort(by_offset.begin(), by_offset.end(),
                     [](const Entry* a, const Entry* b) { return a->begin != b->begin ? a->begin < b->begin : a->end < b->end; });
    std::uint64_t at = 0;
    const Entry* prev = nullptr;
    for (const Entry* e : by_offset) {
        if (e->begin < at)
            return fail(fmt::format("tensors '{}' and '{}' overlap: bytes [{}, {}) and [{}, {}) of the data", prev->name,
                                    e->name, prev->begin, prev->end, e->begin, e->end));
        if (e->begin > at)
            return fail(fmt::format("bytes [{}, {}) of the data belong to no tensor (a gap before tensor '{}')", at, e->begin, e->name));
        at = e->end;
        prev = e;
    }
    if (at != data.size())
        return fail(fmt::format("bytes [{}, {}) of the data belong to no tensor (after the last one)", at, data.size()));

    TensorSet set;
    set.path = path;
    for (const auto& e : entries) {
        Tensor t;
        t.name = e.name;
        t.shape = e.shape;
        const ElementType& type = *element_type(e.dtype);
        t.dtype = type.name;
        std::string error;
        if (!decode_elements(type, data.substr(static_cast<std::size_t>(e.begin)), 0, e.shape, {}, true, t.values, error))
            return fail(fmt::format("tensor '{}': {}", e.name, error));
        set.tensors.push_back(std::move(t));
    }
    if (set.tensors.empty()) return fail("the safetensors file holds no tensors");
    return set;
}

}  // namespace meander::weights
