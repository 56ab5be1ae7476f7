// A restricted reader of Python pickles: only the opcodes and globals that a
// torch.save'd dictionary of tensors uses. Nothing is executed: the few
// allowed calls (an empty OrderedDict, the tensor and parameter rebuild
// functions) are interpreted as data, and anything else is refused.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

namespace meander::weights {

struct PyValue;
using PyRef = std::shared_ptr<PyValue>;

struct PyValue {
    enum class Kind { none, boolean, integer, real, string, bytes, tuple, list, dict, global, storage, tensor };
    Kind kind = Kind::none;
    std::int64_t integer = 0;                    // boolean, integer
    double real = 0;
    std::string text;                            // string, bytes, global ("module.name"), storage type
    std::vector<PyRef> items;                    // tuple, list
    std::vector<std::pair<PyRef, PyRef>> entries;  // dict, in insertion order
    // storage: `text` is the storage type ("FloatStorage"); tensor: `items[0]` is its storage
    std::string key;                             // storage: the file name under data/
    std::size_t numel = 0;                       // storage: elements
    std::size_t offset = 0;                      // tensor: storage offset in elements
    std::vector<std::size_t> shape, strides;     // tensor
};

// What a value is, for messages: "a dictionary", "a tensor", "the number 3".
std::string describe(const PyValue& v);

// Reads a whole pickle; on failure returns nullopt and sets `error`
// (messages start with the byte of the failing opcode).
std::optional<PyRef> unpickle(std::string_view bytes, std::string& error);

}  // namespace meander::weights
