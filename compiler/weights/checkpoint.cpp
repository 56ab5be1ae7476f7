// PyTorch checkpoints written by torch.save (the zip form of PyTorch >= 1.6):
// FOLDER/data.pkl (a pickle, read by the restricted unpickler), one raw
// storage file per storage in FOLDER/data/KEY, and optionally
// FOLDER/byteorder ("little" or "big"; little when absent).
#include "formats.hpp"

#include <fmt/format.h>

#include <map>

#include "unpickle.hpp"
#include "zip.hpp"

namespace meander::weights {

namespace {

// The keys of a dictionary with what each holds, for messages.
std::string key_list(const PyValue& dict) {
    std::string out;
    std::size_t shown = 0;
    for (const auto& [k, v] : dict.entries) {
        if (shown == 12) {
            out += fmt::format(" and {} more", dict.entries.size() - shown);
            break;
        }
        out += fmt::format("{}'{}' ({})", shown ? ", " : "", k->kind == PyValue::Kind::string ? k->text : describe(*k),
                           describe(*v));
        ++shown;
    }
    return out.empty() ? "none" : out;
}

const PyValue* lookup(const PyValue& dict, const std::string& key) {
    for (const auto& [k, v] : dict.entries)
        if (k->kind == PyValue::Kind::string && k->text == key) return v.get();
    return nullptr;
}

}  // namespace

std::optional<TensorSet> read_checkpoint_bytes(std::string_view bytes, const std::string& path,
                                               const std::string& key_path, Diagnostics& diags,
                                               const WeightsLimit& limit) {
    auto fail = [&](std::string message) {
        diags.error(path, std::move(message));
        return std::nullopt;
    };
    if (!file_within_limit(bytes.size(), path, limit, diags)) return std::nullopt;
    ZipArchive ar;
    std::string error;
    if (!open_zip(bytes, ar, error)) {
        if (bytes.size() >= 2 && static_cast<unsigned char>(bytes[0]) == 0x80)
            return fail("this checkpoint is a bare pickle (torch.save with _use_new_zipfile_serialization=False): "
                        "meander reads the zip form that torch.save writes by default");
        return fail(fmt::format("cannot open the checkpoint: {}", error));
    }
    // Members by name; the pickle is the one "data.pkl" one folder deep.
    std::map<std::string, zip_uint64_t> members;
    std::string prefix;
    int pickles = 0;
    const zip_int64_t n = zip_get_num_entries(ar.za, 0);
    for (zip_int64_t i = 0; i < n; ++i) {
        const char* name = zip_get_name(ar.za, static_cast<zip_uint64_t>(i), 0);
        if (!name) return fail(fmt::format("member {} of the checkpoint is unreadable", i + 1));
        std::string m = name;
        members[m] = static_cast<zip_uint64_t>(i);
        const std::size_t slash = m.find('/');
        if (slash != std::string::npos && m.compare(slash, std::string::npos, "/data.pkl") == 0) {
            prefix = m.substr(0, slash + 1);
            ++pickles;
        }
    }
    if (pickles != 1)
        return fail(pickles == 0 ? "not a torch.save checkpoint: no FOLDER/data.pkl member in the zip archive"
                                 : "the checkpoint holds more than one FOLDER/data.pkl");
    // Members are inflated as the pickle names them; the total read is held to
    // the limit, each member checked before it is inflated.
    zip_uint64_t inflated = 0;
    auto member = [&](const std::string& name, std::string& err) -> std::optional<std::string> {
        const zip_uint64_t index = members.at(name);
        zip_stat_t st;
        zip_stat_init(&st);
        if (zip_stat_index(ar.za, index, 0, &st) != 0) {
            err = "unreadable";
            return std::nullopt;
        }
        const zip_uint64_t size = declared_size(st);
        if (size > limit.bytes - inflated) {
            err = fmt::format("it would bring the inflated size of the members read to {} bytes{}; it was not inflated",
                              inflated + size, beyond_limit(limit));
            return std::nullopt;
        }
        auto data = read_member(ar.za, index, st, limit.bytes - inflated, err);
        if (data) inflated += data->size();
        return data;
    };
    bool little = true;
    if (members.count(prefix + "byteorder")) {
        auto order = member(prefix + "byteorder", error);
        if (!order) return fail(fmt::format("member '{}byteorder': {}", prefix, error));
        if (*order != "little" && *order != "big")
            return fail(fmt::format("member '{}byteorder' holds '{}', not 'little' or 'big'", prefix, order->substr(0, 16)));
        little = *order == "little";
    }
    auto pickle = member(prefix + "data.pkl", error);
    if (!pickle) return fail(fmt::format("member '{}data.pkl': {}", prefix, error));
    auto root = unpickle(*pickle, error);
    if (!root) return fail(fmt::format("{}data.pkl: {}", prefix, error));

    // Follow the key path to the dictionary of tensors.
    const PyValue* dict = root->get();
    std::string walked;
    std::size_t from = 0;
    while (!key_path.empty() && from <= key_path.size()) {
        std::size_t slash = key_path.find('/', from);
        std::string key = key_path.substr(from, slash == std::string::npos ? std::string::npos : slash - from);
        if (dict->kind != PyValue::Kind::dict)
            return fail(fmt::format("key path '{}': {} is {}, not a dictionary", key_path,
                                    walked.empty() ? "the checkpoint" : "'" + walked + "'", describe(*dict)));
        const PyValue* next = lookup(*dict, key);
        if (!next)
            return fail(fmt::format("key path '{}': no key '{}' in {}; its keys: {}", key_path, key,
                                    walked.empty() ? "the checkpoint" : "'" + walked + "'", key_list(*dict)));
        walked += (walked.empty() ? "" : "/") + key;
        dict = next;
        if (slash == std::string::npos) break;
        from = slash + 1;
    }
    const std::string where = walked.empty() ? "the checkpoint" : fmt::format("'{}'", walked);
    if (dict->kind != PyValue::Kind::dict) return fail(fmt::format("{} is {}, not a dictionary of tensors", where, describe(*dict)));

    TensorSet set;
    set.path = path;
    std::map<std::string, std::string> storages;  // key -> bytes, each read once
    for (const auto& [k, v] : dict->entries) {
        if (v->kind != PyValue::Kind::tensor) continue;  // an epoch number, a nested dictionary: not a tensor
        if (k->kind != PyValue::Kind::string) return fail(fmt::format("{} has a tensor under {}, not a name", where, describe(*k)));
        const PyValue& storage = *v->items[0];
        const ElementType* type = element_type(storage.text);
        if (!type) return fail(fmt::format("tensor '{}': storage type '{}' is not read", k->text, storage.text));
        const std::string file = prefix + "data/" + storage.key;
        if (!storages.count(storage.key)) {
            if (!members.count(file))
                return fail(fmt::format("tensor '{}': its storage file '{}' is missing from the archive", k->text, file));
            auto data = member(file, error);
            if (!data) return fail(fmt::format("member '{}': {}", file, error));
            if (storage.numel > data->size() / type->bytes || data->size() != storage.numel * type->bytes)
                return fail(fmt::format("tensor '{}': storage file '{}' holds {} bytes, its {} of {} elements needs {}", k->text,
                                        file, data->size(), storage.text, storage.numel, storage.numel * type->bytes));
            storages[storage.key] = std::move(*data);
        }
        Tensor t;
        t.name = k->text;
        t.shape = v->shape;
        t.dtype = type->name;
        if (!decode_elements(*type, storages[storage.key], v->offset, v->shape, v->strides, little, t.values, error))
            return fail(fmt::format("tensor '{}': {}", k->text, error));
        set.tensors.push_back(std::move(t));
    }
    if (set.tensors.empty())
        return fail(fmt::format("{} holds no tensors; its keys: {}{}", where, key_list(*dict),
                                walked.empty() ? " (name the dictionary of tensors with 'under \"KEY\"' after the weights path)" : ""));
    return set;
}

}  // namespace meander::weights
