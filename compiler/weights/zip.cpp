// Reading a zip archive in memory through libzip (see zip.hpp).
#include "zip.hpp"

#include <fmt/format.h>

namespace meander::weights {

namespace {

struct ZipFile {
    zip_file_t* zf = nullptr;
    ~ZipFile() { if (zf) zip_fclose(zf); }
};

}  // namespace

std::string zip_problem(int code, zip_error_t* err) {
    switch (code) {
    case ZIP_ER_NOZIP: return "not a zip archive";
    case ZIP_ER_INCONS: return "the zip directory is damaged";
    case ZIP_ER_CRC: return "CRC mismatch";
    case ZIP_ER_ZLIB:
    case ZIP_ER_COMPRESSED_DATA: return "the compressed data is invalid";
    case ZIP_ER_EOF: return "the data ends early";
    case ZIP_ER_COMPNOTSUPP: return "compression method not supported";
    case ZIP_ER_ENCRNOTSUPP:
    case ZIP_ER_NOPASSWD: return "encrypted members are not read";
    default: return zip_error_strerror(err);
    }
}

bool open_zip(std::string_view bytes, ZipArchive& ar, std::string& error) {
    zip_error_t err;
    zip_error_init(&err);
    zip_source_t* src = zip_source_buffer_create(bytes.data(), bytes.size(), 0, &err);
    if (src) {
        ar.za = zip_open_from_source(src, ZIP_RDONLY | ZIP_CHECKCONS, &err);
        if (!ar.za) zip_source_free(src);
    }
    if (!ar.za) {
        // The archive is already in memory: a missing entry, a short read or a
        // bad seek all mean its directory points where nothing is.
        int code = zip_error_code_zip(&err);
        if (code == ZIP_ER_NOENT || code == ZIP_ER_SEEK || code == ZIP_ER_READ || code == ZIP_ER_EOF) code = ZIP_ER_INCONS;
        // A file that starts like a zip archive is a damaged one, not some other file.
        if (code == ZIP_ER_NOZIP && bytes.substr(0, 4) == std::string_view("PK\x03\x04", 4)) code = ZIP_ER_INCONS;
        error = zip_problem(code, &err);
        zip_error_fini(&err);
        return false;
    }
    zip_error_fini(&err);
    return true;
}

zip_uint64_t declared_size(const zip_stat_t& st) { return (st.valid & ZIP_STAT_SIZE) ? st.size : 0; }

std::optional<std::string> read_member(zip_t* za, zip_uint64_t index, const zip_stat_t& st, zip_uint64_t max_bytes,
                                       std::string& error) {
    if ((st.valid & ZIP_STAT_SIZE) && st.size > max_bytes) {
        error = fmt::format("it declares {} bytes, more than the {} left within the limit", st.size, max_bytes);
        return std::nullopt;
    }
    if ((st.valid & ZIP_STAT_SIZE) && (st.valid & ZIP_STAT_COMP_SIZE) && (st.valid & ZIP_STAT_COMP_METHOD)) {
        // Deflate expands at most about 1032:1; a larger claim is damage.
        bool stored = st.comp_method == ZIP_CM_STORE;
        if ((stored && st.size != st.comp_size) || (!stored && st.size / 1100 > st.comp_size + 1)) {
            error = fmt::format("damaged: it declares {} bytes from {} stored bytes", st.size, st.comp_size);
            return std::nullopt;
        }
    }
    ZipFile f;
    f.zf = zip_fopen_index(za, index, 0);
    if (!f.zf) {
        zip_error_t* err = zip_get_error(za);
        error = fmt::format("cannot open: {}", zip_problem(zip_error_code_zip(err), err));
        return std::nullopt;
    }
    std::string data;
    char buf[1 << 15];
    // The declared size is within the limit: one allocation, no doubling past it.
    if (st.valid & ZIP_STAT_SIZE) data.reserve(static_cast<std::size_t>(st.size) + sizeof buf);
    while (true) {
        zip_int64_t n = zip_fread(f.zf, buf, sizeof buf);
        if (n < 0) {
            zip_error_t* err = zip_file_get_error(f.zf);
            error = fmt::format("damaged: {}", zip_problem(zip_error_code_zip(err), err));
            return std::nullopt;
        }
        if (n == 0) break;
        data.append(buf, static_cast<std::size_t>(n));
        if (data.size() > max_bytes) {
            error = fmt::format("it inflates to more than the {} bytes left within the limit", max_bytes);
            return std::nullopt;
        }
        if ((st.valid & ZIP_STAT_SIZE) && data.size() > st.size) break;
    }
    if ((st.valid & ZIP_STAT_SIZE) && data.size() != st.size) {
        error = fmt::format("damaged: {} bytes read, {} declared", data.size(), st.size);
        return std::nullopt;
    }
    return data;
}

}  // namespace meander::weights
