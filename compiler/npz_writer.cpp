#include "npz_writer.hpp"

#include <fmt/format.h>
#include <zip.h>

#include <cstring>

namespace meander {

namespace {

// NEP 1 version 1.0: magic, version, header length (u16 LE), a dict padded
// with spaces to a multiple of 64 bytes ending in a newline, then C-order data.
std::string npy_bytes(const Tensor& t, const std::string& dtype) {
    std::string shape;
    for (std::size_t d : t.shape) shape += fmt::format("{}, ", d);
    if (t.shape.size() > 1) shape.resize(shape.size() - 2);  // (3, 4) but (3,)
    else if (!t.shape.empty()) shape.pop_back();
    std::string header = fmt::format("{{'descr': '{}', 'fortran_order': False, 'shape': ({}), }}",
                                     dtype == "float32" ? "<f4" : "<f8", shape);
    const std::size_t total = 10 + header.size() + 1;
    header.append((64 - total % 64) % 64, ' ');
    header += '\n';
    std::string out("\x93NUMPY\x01\x00", 8);
    out += static_cast<char>(header.size() & 0xff);
    out += static_cast<char>((header.size() >> 8) & 0xff);
    out += header;
    for (double v : t.values) {
        // Little-endian hosts only (the hosts meander builds on: x86-64, AArch64).
        if (dtype == "float32") {
            const float f = static_cast<float>(v);
            char b[4];
            std::memcpy(b, &f, 4);
            out.append(b, 4);
        } else {
            char b[8];
            std::memcpy(b, &v, 8);
            out.append(b, 8);
        }
    }
    return out;
}

}  // namespace

std::optional<std::string> npz_bytes(const TensorSet& set, const std::string& dtype) {
    std::vector<std::string> members;
    for (const Tensor& t : set.tensors) members.push_back(npy_bytes(t, dtype));
    zip_error_t err;
    zip_error_init(&err);
    zip_source_t* buf = zip_source_buffer_create(nullptr, 0, 0, &err);
    if (!buf) return std::nullopt;
    zip_source_keep(buf);
    zip_t* za = zip_open_from_source(buf, ZIP_TRUNCATE, &err);
    if (!za) {
        zip_source_free(buf);
        return std::nullopt;
    }
    bool ok = true;
    for (std::size_t i = 0; i < members.size() && ok; ++i) {
        zip_source_t* s = zip_source_buffer(za, members[i].data(), members[i].size(), 0);
        const zip_int64_t idx = s ? zip_file_add(za, (set.tensors[i].name + ".npy").c_str(), s, ZIP_FL_ENC_UTF_8) : -1;
        if (idx < 0) {
            if (s) zip_source_free(s);
            ok = false;
            break;
        }
        // Stored and dated 1980-01-01 00:00 (DOS time 0, date 0x21): the same bytes every run.
        ok = zip_set_file_compression(za, static_cast<zip_uint64_t>(idx), ZIP_CM_STORE, 0) == 0 &&
             zip_file_set_dostime(za, static_cast<zip_uint64_t>(idx), 0, 0x21, 0) == 0;
    }
    if (!ok || zip_close(za) != 0) {
        zip_discard(za);
        zip_source_free(buf);
        return std::nullopt;
    }
    std::string out;
    if (zip_source_open(buf) == 0) {
        zip_source_seek(buf, 0, SEEK_END);
        const zip_int64_t size = zip_source_tell(buf);
        zip_source_seek(buf, 0, SEEK_SET);
        out.resize(static_cast<std::size_t>(size));
        if (zip_source_read(buf, out.data(), static_cast<zip_uint64_t>(size)) != size) ok = false;
        zip_source_close(buf);
    } else {
        ok = false;
    }
    zip_source_free(buf);
    if (!ok) return std::nullopt;
    return out;
}

}  // namespace meander
