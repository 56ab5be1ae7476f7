#include "compiler/command_support.hpp"

#include <fmt/format.h>

#include <cstdio>

namespace meander::cli {

// Prints what was collected; returns true when there were no errors.
bool flush(const Diagnostics& diags) {
    std::string text = diags.render();
    if (!text.empty()) std::fputs(text.c_str(), stderr);
    return diags.ok();
}

Precision precision_of(const std::string& s) { return s == "float64" ? Precision::float64 : Precision::float32; }

StorageOverride storage_of(const std::string& s) { return s.empty() ? std::nullopt : weight_storage_from_name(s); }

// Commands that do not handle streaming models yet refuse them plainly.
bool refuse_stream(const LoadedModel& l, const std::string& path, std::string_view command, Diagnostics& diags) {
    if (!l.model.stream) return false;
    diags.error(path, fmt::format("'{}' is a streaming model (it has a 'state' statement); meander {} does not handle streaming "
                                  "models yet (check, eval, compile, verify, cost, tune and format do)",
                                  l.model.name, command));
    return true;
}


std::optional<LoadedWithRows> load_with_rows(const std::string& path, Precision p, const std::string& input,
                                             Diagnostics& diags, std::string_view command, bool float32_inputs,
                                             StorageOverride storage) {
    auto loaded = load_model(path, p, diags, true, storage);
    if (!loaded || refuse_stream(*loaded, path, command, diags)) return std::nullopt;
    std::vector<int> lines;
    auto rows = read_csv_rows(input, loaded->model.input_size, diags, float32_inputs, &lines, loaded->model.input_name,
                              &loaded->model.input_info);
    if (!rows) return std::nullopt;
    return LoadedWithRows{std::move(*loaded), std::move(*rows), std::move(lines)};
}

}  // namespace meander::cli
