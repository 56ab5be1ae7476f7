// libFuzzer harness for every weights reader, through the in-memory entry
// points of compiler/weights/formats.hpp: the same bytes go to the .npy,
// .npz, folder, listing (.mnw), safetensors and torch.save readers (each
// refuses a foreign format at its first bytes, so one corpus serves all). A
// set that is read is rendered as the `tensors` table and must survive a
// round trip through a weight listing with the same names, shapes and bits.
// A crash, a sanitizer report or a broken property (__builtin_trap) is a finding.
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstring>
#include <string>
#include <string_view>

#include "compiler/tensors.hpp"
#include "compiler/weights.hpp"
#include "compiler/weights/formats.hpp"

using namespace meander;
using namespace meander::weights;

namespace {

// Far below the 256 MiB of a real read, so a small input that declares a large
// archive costs the search little; the limit's own checks are what is exercised.
const WeightsLimit kLimit{std::uint64_t{16} << 20, "fuzzing"};

bool same_bits(double a, double b) {
    if (std::isnan(a) && std::isnan(b)) return true;
    return std::memcmp(&a, &b, sizeof a) == 0;
}

void round_trip(const TensorSet& set) {
    (void)render_tensor_table(set, nullptr);
    Diagnostics diags;
    auto back = read_listing_bytes(write_listing(set), "round-trip.mnw", diags, WeightsLimit{});
    if (!back || back->tensors.size() != set.tensors.size()) __builtin_trap();
    for (std::size_t i = 0; i < set.tensors.size(); ++i) {
        const Tensor& a = set.tensors[i];
        const Tensor& b = back->tensors[i];
        if (a.name != b.name || a.shape != b.shape || a.values.size() != b.values.size()) __builtin_trap();
        // Listings hold float32 and float64; every other dtype is written as float64, exactly.
        const bool f32 = a.dtype == "float32";
        for (std::size_t j = 0; j < a.values.size(); ++j) {
            const double want = f32 ? static_cast<double>(static_cast<float>(a.values[j])) : a.values[j];
            if (!same_bits(want, b.values[j])) __builtin_trap();
        }
    }
}

void check(const std::optional<TensorSet>& set, const Diagnostics& diags) {
    (void)diags.render();
    if (set) round_trip(*set);
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
    const std::string_view bytes(reinterpret_cast<const char*>(data), size);
    {
        Diagnostics d;
        check(read_npy_bytes(bytes, "f.npy", d, kLimit), d);
    }
    {
        Diagnostics d;
        check(read_npz_bytes(bytes, "f.npz", d, kLimit), d);
    }
    {
        Diagnostics d;
        check(read_npy_folder_files("f", {{"a.npy", std::string(bytes)}}, d, kLimit), d);
    }
    {
        Diagnostics d;
        check(read_listing_bytes(std::string(bytes), "f.mnw", d, kLimit), d);
    }
    {
        Diagnostics d;
        check(read_safetensors_bytes(bytes, "f.safetensors", d, kLimit), d);
    }
    for (const char* key : {"", "state_dict", "model/state_dict"}) {
        Diagnostics d;
        check(read_checkpoint_bytes(bytes, "f.pt", key, d, kLimit), d);
    }
    return 0;
}
