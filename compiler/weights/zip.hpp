// Reading a zip archive that is already in memory, through libzip: the .npz
// and the PyTorch checkpoint readers share it.
#pragma once

#include <zip.h>

#include <optional>
#include <string>
#include <string_view>

namespace meander::weights {

struct ZipArchive {
    zip_t* za = nullptr;
    ZipArchive() = default;
    ZipArchive(const ZipArchive&) = delete;
    ZipArchive& operator=(const ZipArchive&) = delete;
    ~ZipArchive() { if (za) zip_discard(za); }
};

// What a libzip error code means for a reader of weights.
std::string zip_problem(int code, zip_error_t* err);

// Opens `bytes` (which must outlive `ar`); on failure sets `error` to what is wrong.
bool open_zip(std::string_view bytes, ZipArchive& ar, std::string& error);

// Reads member `index` whole, at most `max_bytes` of it (callers check the
// declared size against their limit first; this stops a member whose size is
// not declared); on failure sets `error`.
std::optional<std::string> read_member(zip_t* za, zip_uint64_t index, const zip_stat_t& st, zip_uint64_t max_bytes,
                                       std::string& error);

// The inflated size a member declares (0 when it declares none).
zip_uint64_t declared_size(const zip_stat_t& st);

}  // namespace meander::weights
