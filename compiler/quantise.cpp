#include "quantise.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdlib>

#include "../runtime/evaluate.hpp"

namespace meander {

int storage_top(WeightStorage s) {
    switch (s) {
    case WeightStorage::int8: return 127;
    case WeightStorage::int16: return 32767;
    case WeightStorage::real: break;
    }
    return 0;
}

int storage_bytes(WeightStorage s, Precision p) {
    switch (s) {
    case WeightStorage::int8: return 1;
    case WeightStorage::int16: return 2;
    case WeightStorage::real: break;
    }
    return p == Precision::float32 ? 4 : 8;
}

// Measured on single layers N -> N (identity, with bias, no time input)
// compiled for the Cortex-M4F with -Os, the object's .text + .rodata from
// arm-none-eabi-size against the same layer emitted with float32 weights
// (tests/target/storage_threshold.sh prints the table; 2026-12-02, gcc 12.2.1):
//   N = 3 (9 weights): int8 +25 B, int16 +34 B (no block of 4 rows: the scales cost more)
//   N = 4 (16 weights): int8 -60 B, int16 -40 B; N = 8: -320 / -256; N = 16: -1148 / -892.
// So a layer of fewer than 16 weights stays real.
long min_quantised_weights(WeightStorage s) {
    // Set to 0 by tests/target/storage_threshold.sh to measure the integer kernel of any layer.
    if (const char* v = std::getenv("MEANDER_MIN_QUANTISED_WEIGHTS"); v != nullptr && *v != '\0')
        return std::strtol(v, nullptr, 10);
    switch (s) {
    case WeightStorage::int8: return 16;
    case WeightStorage::int16: return 16;
    case WeightStorage::real: break;
    }
    return 0;
}

double dequantise(std::int32_t q, double s, Precision p) {
    if (p == Precision::float32) return static_cast<double>(static_cast<float>(q) * static_cast<float>(s));
    return static_cast<double>(q) * s;
}

QuantisedRows quantise_rows(const std::vector<double>& w, int rows, int cols, WeightStorage s, Precision p) {
    QuantisedRows out;
    out.rows = rows;
    out.cols = cols;
    const int top = storage_top(s);
    const auto at = [&](int r, int c) { return w[static_cast<std::size_t>(r) * static_cast<std::size_t>(cols) + static_cast<std::size_t>(c)]; };
    for (int r = 0; r < rows; ++r)
        for (int c = 0; c < cols; ++c)
            if (!std::isfinite(at(r, c))) {
                out.trouble = fmt::format("weight [{}, {}] is not finite", r, c);
                return out;
            }
    out.q.reserve(w.size());
    out.dequantised.reserve(w.size());
    for (int r = 0; r < rows; ++r) {
        double largest = 0.0;
        for (int c = 0; c < cols; ++c) largest = std::max(largest, std::fabs(at(r, c)));
        const double exact = largest / top;  // the integers follow this scale, in any precision
        double stored = exact;
        if (p == Precision::float32) stored = static_cast<double>(static_cast<float>(exact));
        if (largest == 0.0) {
            out.zero_rows.push_back(r);
        } else if (!std::isnormal(exact) ||
                   (p == Precision::float32 ? !std::isnormal(static_cast<float>(exact)) : !std::isnormal(stored))) {
            // A subnormal scale would round the dequantised weights coarsely.
            out.trouble = fmt::format("row {}'s largest weight {} is too small for a {} scale", r, largest,
                                      p == Precision::float32 ? "float32" : "float64");
            return out;
        }
        out.scale.push_back(largest == 0.0 ? 0.0 : stored);
        for (int c = 0; c < cols; ++c) {
            double q = largest == 0.0 ? 0.0 : std::round(at(r, c) / exact);  // ties away from zero
            q = std::min(std::max(q, -static_cast<double>(top)), static_cast<double>(top));
            const auto qi = static_cast<std::int32_t>(q);
            out.q.push_back(qi);
            out.dequantised.push_back(dequantise(qi, out.scale.back(), p));
        }
    }
    return out;
}

namespace {

std::string row_list(const std::vector<int>& rows) {
    std::string s;
    for (std::size_t i = 0; i < rows.size() && i < 8; ++i) s += fmt::format("{}{}", i ? ", " : "", rows[i]);
    if (rows.size() > 8) s += fmt::format(" and {} more", rows.size() - 8);
    return s;
}

struct Quantiser {
    Precision p;
    std::optional<WeightStorage> override;
    std::vector<StorageNote> notes;

    void layer(Dense& d, std::optional<WeightStorage> inherited) {
        d.storage = WeightStorage::real;
        d.qweight.clear();
        d.qscale.clear();
        d.kept_real.clear();
        WeightStorage want = WeightStorage::real;
        if (override) want = *override;
        else if (d.storage_asked) want = d.storage_asked->storage;
        else if (inherited) want = *inherited;
        if (want == WeightStorage::real || d.weight.size() == 0) return;
        const long n = dense_macs(d);
        const char* real_name = p == Precision::float32 ? "float32" : "float64";
        if (n < min_quantised_weights(want)) {
            d.kept_real = fmt::format("kept in {}: {} weights, fewer than the {} below which {} scales and code take "
                                      "more flash than they save",
                                      real_name, n, min_quantised_weights(want), weight_storage_name(want));
            notes.push_back({&d, d.kept_real});
            return;
        }
        std::vector<double> w;
        w.reserve(static_cast<std::size_t>(n));
        for (int r = 0; r < d.out; ++r)
            for (int c = 0; c < d.in_total(); ++c) w.push_back(d.weight(r, c));
        QuantisedRows qr = quantise_rows(w, d.out, d.in_total(), want, p);
        if (!qr.trouble.empty()) {
            d.kept_real = fmt::format("kept in {}: {}", real_name, qr.trouble);
            notes.push_back({&d, d.kept_real});
            return;
        }
        d.storage = want;
        d.qweight = std::move(qr.q);
        d.qscale = std::move(qr.scale);
        for (int r = 0; r < d.out; ++r)
            for (int c = 0; c < d.in_total(); ++c)
                d.weight(r, c) = qr.dequantised[static_cast<std::size_t>(r * d.in_total() + c)];
        if (!qr.zero_rows.empty())
            notes.push_back({&d, fmt::format("row{} {} all zero: scale 0, stored exactly", qr.zero_rows.size() == 1 ? "" : "s",
                                             row_list(qr.zero_rows))});
    }

    void blocks(std::vector<Block>& bs, std::optional<WeightStorage> inherited) {
        for (Block& b : bs) {
            switch (b.kind) {
            case Block::Kind::dense: layer(b.dense, inherited); break;
            case Block::Kind::residual:
                blocks(b.residual.body, b.residual.storage_asked ? b.residual.storage_asked->storage : inherited);
                break;
            case Block::Kind::continuous:
                blocks(b.continuous.field, b.continuous.storage_asked ? b.continuous.storage_asked->storage : inherited);
                break;
            }
        }
    }
};

}  // namespace

std::vector<StorageNote> quantise_model(Model& model, Precision p, std::optional<WeightStorage> override) {
    Quantiser q{p, override, {}};
    std::optional<WeightStorage> top;
    if (model.storage_asked) top = model.storage_asked->storage;
    q.blocks(model.blocks, top);
    if (model.stream) {
        Continuous& ev = model.stream->evolve;
        q.blocks(ev.field, ev.storage_asked ? ev.storage_asked->storage : top);
        q.blocks(model.stream->update_layers, top);
    }
    return q.notes;
}

long weight_table_bytes(const Dense& d, WeightStorage s, Precision p) {
    const long weights = dense_macs(d) * storage_bytes(s, p);
    if (s == WeightStorage::real) return weights;
    return weights + static_cast<long>(d.out) * storage_bytes(WeightStorage::real, p);
}

}  // namespace meander
