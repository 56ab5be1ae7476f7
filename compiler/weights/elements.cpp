// Element types of the framework formats and their exact conversion to
// double: float16 and bfloat16 widen exactly, integers up to 2^53 too.
#include "formats.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>

namespace meander::weights {

namespace {

const ElementType kTypes[] = {
    {"F64", "DoubleStorage", "float64", 8, ElementType::Kind::ieee},
    {"F32", "FloatStorage", "float32", 4, ElementType::Kind::ieee},
    {"F16", "HalfStorage", "float16", 2, ElementType::Kind::half},
    {"BF16", "BFloat16Storage", "bfloat16", 2, ElementType::Kind::bfloat},
    {"I64", "LongStorage", "int64", 8, ElementType::Kind::signed_int},
    {"I32", "IntStorage", "int32", 4, ElementType::Kind::signed_int},
    {"I16", "ShortStorage", "int16", 2, ElementType::Kind::signed_int},
    {"I8", "CharStorage", "int8", 1, ElementType::Kind::signed_int},
    {"U8", "ByteStorage", "uint8", 1, ElementType::Kind::unsigned_int},
    {"BOOL", "BoolStorage", "bool", 1, ElementType::Kind::unsigned_int},
};

double half_to_double(std::uint16_t h) {
    const int sign = (h >> 15) ? -1 : 1;
    const int exp = (h >> 10) & 0x1f;
    const int man = h & 0x3ff;
    if (exp == 0) return sign * std::ldexp(static_cast<double>(man), -24);
    if (exp == 31) return man ? std::nan("") : sign * HUGE_VAL;
    return sign * std::ldexp(static_cast<double>(1024 + man), exp - 25);
}

double bfloat_to_double(std::uint16_t b) {
    const std::uint32_t bits = static_cast<std::uint32_t>(b) << 16;
    float f;
    std::memcpy(&f, &bits, 4);
    return static_cast<double>(f);
}

}  // namespace

const ElementType* element_type(std::string_view spelling) {
    for (const auto& t : kTypes)
        if (spelling == t.safetensors || spelling == t.storage) return &t;
    return nullptr;
}

std::string element_type_list() { return "F64, F32, F16, BF16, I64, I32, I16, I8, U8 and BOOL"; }

bool decode_elements(const ElementType& type, std::string_view storage, std::size_t offset,
                     const std::vector<std::size_t>& shape, const std::vector<std::size_t>& strides, bool little,
                     std::vector<double>& out, std::string& error) {
    const std::size_t rank = shape.size();
    auto count = element_count(shape);
    if (!count) {
        error = fmt::format("shape {} is too large", shape_text(shape));
        return false;
    }
    // Strides in elements; none given means C order.
    std::vector<std::size_t> st = strides;
    if (st.empty()) {
        st.assign(rank, 1);
        for (std::size_t k = rank; k-- > 1;) st[k - 1] = st[k] * shape[k];
    }
    const std::size_t storage_elems = storage.size() / type.bytes;
    if (*count > 0) {
        // The furthest element, checked before anything is read or allocated.
        std::size_t last = offset;
        for (std::size_t k = 0; k < rank; ++k) {
            const std::size_t span = shape[k] - 1;
            if (span != 0 && st[k] > (std::numeric_limits<std::size_t>::max() - last) / span) last = std::numeric_limits<std::size_t>::max();
            else last += span * st[k];
        }
        if (last >= storage_elems) {
            error = fmt::format("shape {} with storage offset {} and strides ({}) reaches element {}, past the {} elements of its storage",
                                shape_text(shape), offset, fmt::join(st, ", "), last, storage_elems);
            return false;
        }
    }
    out.assign(*count, 0.0);
    std::vector<std::size_t> idx(rank, 0);
    const bool swap = little != host_is_little();
    for (std::size_t i = 0; i < *count; ++i) {
        std::size_t e = offset;
        for (std::size_t k = 0; k < rank; ++k) e += idx[k] * st[k];
        unsigned char b[8];
        std::memcpy(b, storage.data() + e * type.bytes, type.bytes);
        if (swap) std::reverse(b, b + type.bytes);
        double v = 0;
        switch (type.kind) {
        case ElementType::Kind::ieee:
            if (type.bytes == 4) {
                float f;
                std::memcpy(&f, b, 4);
                v = static_cast<double>(f);
            } else {
                std::memcpy(&v, b, 8);
            }
            break;
        case ElementType::Kind::half: {
            std::uint16_t h;
            std::memcpy(&h, b, 2);
            v = half_to_double(h);
            break;
        }
        case ElementType::Kind::bfloat: {
            std::uint16_t h;
            std::memcpy(&h, b, 2);
            v = bfloat_to_double(h);
            break;
        }
        case ElementType::Kind::signed_int: {
            std::int64_t n = 0;
            if (type.bytes == 8) std::memcpy(&n, b, 8);
            else if (type.bytes == 4) { std::int32_t x; std::memcpy(&x, b, 4); n = x; }
            else if (type.bytes == 2) { std::int16_t x; std::memcpy(&x, b, 2); n = x; }
            else { std::int8_t x; std::memcpy(&x, b, 1); n = x; }
            if (n > (std::int64_t{1} << 53) || n < -(std::int64_t{1} << 53)) {
                error = fmt::format("{} value {} at flat index {} cannot be held exactly in a double", type.name, n, i);
                return false;
            }
            v = static_cast<double>(n);
            break;
        }
        case ElementType::Kind::unsigned_int:
            v = static_cast<double>(b[0]);
            break;
        }
        out[i] = v;
        for (std::size_t k = rank; k-- > 0;) {
            if (++idx[k] < shape[k]) break;
            idx[k] = 0;
        }
    }
    return true;
}

}  // namespace meander::weights
