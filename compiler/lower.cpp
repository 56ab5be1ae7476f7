#include "lower.hpp"

#include "quantise.hpp"

#include <fmt/format.h>

#include <algorithm>

#include "../runtime/evaluate.hpp"
#include "../runtime/integrate.hpp"
#include "../runtime/stream.hpp"

namespace meander {

namespace {

long dense_params(const Dense& d) {
    return static_cast<long>(d.out) * d.in_total() + (d.has_bias ? d.out : 0);
}

struct Layout {
    Lowered& out;
    double largest_gap = 0.0;       // a streaming model's: bounds an evolution's steps

    std::size_t take(std::size_t base, std::size_t size, std::string name, std::string role) {
        out.buffers.push_back(Buffer{std::move(name), base, size, std::move(role)});
        out.workspace_size = std::max(out.workspace_size, base + size);
        return base;
    }

    // Lays `blocks` out as a chain whose scratch starts at `base`.
    Chain chain(const std::vector<Block>& blocks, const std::string& owner, std::size_t base, int in_width,
                bool in_field) {
        return chain(blocks.data(), blocks.size(), owner, base, in_width, in_field);
    }

    // The first n blocks from `blocks` (a blend's backbone is its field but the heads).
    Chain chain(const Block* blocks, std::size_t n, const std::string& owner, std::size_t base, int in_width,
                bool in_field) {
        Chain c;
        // Results between layers alternate between two buffers wide enough for
        // every intermediate result; the last layer writes the chain's output.
        std::size_t widest = 0;
        for (std::size_t j = 0; j + 1 < n; ++j)
            widest = std::max(widest, static_cast<std::size_t>(block_out_width(blocks[j])));
        const std::size_t pings = n == 0 ? 0 : std::min<std::size_t>(n - 1, 2);
        std::size_t ping[2] = {0, 0};
        for (std::size_t p = 0; p < pings; ++p)
            ping[p] = take(base + p * widest, widest, fmt::format("{}.ping{}", owner, p),
                           "results between layers");
        const std::size_t next = base + pings * widest;

        int width = in_width;
        for (std::size_t j = 0; j < n; ++j) {
            const Block& b = blocks[j];
            ChainOp op;
            op.block = &b;
            op.in_width = width;
            op.out_width = block_out_width(b);
            op.src = j == 0 ? Slot{Slot::Kind::chain_in, 0} : Slot{Slot::Kind::work, ping[(j - 1) % 2]};
            op.dst = j + 1 == n ? Slot{Slot::Kind::chain_out, 0} : Slot{Slot::Kind::work, ping[j % 2]};
            if (b.kind == Block::Kind::residual) {
                op.body = chain(b.residual.body, b.residual.name, next, b.residual.width, in_field);
            } else if (b.kind == Block::Kind::continuous) {
                op.cont = continuous(b.continuous, next);
            } else if (!in_field) {
                out.macs_outside_fields += dense_macs(b.dense);  // fields are counted per evaluation
            }
            width = op.out_width;
            c.ops.push_back(std::move(op));
        }
        return c;
    }

    ContinuousPlan continuous(const Continuous& cb, std::size_t base) {
        ContinuousPlan p;
        p.block = &cb;
        p.tableau = find_tableau(cb.solver.method);
        p.n = static_cast<std::size_t>(cb.state());
        // An adaptive method given `steps N` runs fixed step (as runtime/integrate.cpp).
        p.adaptive = p.tableau != nullptr && p.tableau->adaptive() && cb.solver.steps == 0;
        p.over_gap = cb.over_gap;
        const int stages = p.tableau != nullptr ? p.tableau->stages : 0;
        std::size_t at = base;
        p.y = take(at, p.n, cb.name + ".state", "the state h");
        at += p.n;
        for (int s = 0; s < stages; ++s) {
            p.k.push_back(take(at, p.n, fmt::format("{}.k{}", cb.name, s + 1), fmt::format("stage derivative k_{}", s + 1)));
            at += p.n;
        }
        p.arg = take(at, p.n, cb.name + ".arg", "stage argument y + h*sum(a*k)");
        at += p.n;
        if (p.adaptive) {
            p.y_new = take(at, p.n, cb.name + ".y_new", "solution of the attempted step");
            at += p.n;
        }
        p.field = chain(cb.field, cb.name + ".field", at, cb.state(), true);
        p.macs_per_field_eval = field_macs(cb);
        // Over a gap a fixed-step method takes ceil(rate * gap) steps: at most at the largest gap.
        p.worst_field_evals = worst_field_evals(cb.over_gap ? solver_for_gap(cb.solver, largest_gap) : cb.solver);
        out.macs_per_field_eval += p.macs_per_field_eval;
        out.worst_field_evals += p.worst_field_evals;
        out.worst_macs += p.macs_per_field_eval * p.worst_field_evals;
        return p;
    }
};

long count_params(const std::vector<Block>& blocks) {
    long n = 0;
    for (const Block& b : blocks) {
        switch (b.kind) {
        case Block::Kind::dense: n += dense_params(b.dense); break;
        case Block::Kind::residual: n += count_params(b.residual.body); break;
        case Block::Kind::continuous: n += count_params(b.continuous.field); break;
        }
    }
    return n;
}

void collect(const Chain& c, std::vector<const ContinuousPlan*>& out) {
    for (const ChainOp& op : c.ops)
        if (op.block->kind == Block::Kind::continuous) out.push_back(&op.cont);
}

std::string slot_text(const Slot& s, const std::string& in, const std::string& out) {
    switch (s.kind) {
    case Slot::Kind::chain_in: return in;
    case Slot::Kind::chain_out: return out;
    case Slot::Kind::work: return fmt::format("work[{}]", s.offset);
    }
    return "";
}

void dump_chain(std::string& text, const Chain& c, const std::string& in, const std::string& out, int depth) {
    const std::string pad(static_cast<std::size_t>(depth) * 2, ' ');
    for (const ChainOp& op : c.ops) {
        const std::string src = slot_text(op.src, in, out);
        const std::string dst = slot_text(op.dst, in, out);
        const Block& b = *op.block;
        switch (b.kind) {
        case Block::Kind::dense:
            text += fmt::format("{}dense {}: {} -> {} ({}{} -> {}, {})\n", pad, b.dense.name, src, dst, b.dense.in,
                                b.dense.time_input ? " + t" : "", b.dense.out, activation_name(b.dense.act));
            break;
        case Block::Kind::residual:
            text += fmt::format("{}residual {}: {} -> {} (width {}; then {} += {})\n", pad, b.residual.name, src, dst,
                                b.residual.width, dst, src);
            dump_chain(text, op.body, src, dst, depth + 1);
            break;
        case Block::Kind::continuous: {
            const ContinuousPlan& p = op.cont;
            text += fmt::format("{}continuous {}: {} -> {} (state {} = {} + augment {}; {})\n", pad, b.continuous.name,
                                src, dst, p.n, b.continuous.width, b.continuous.augment, b.continuous.solver.method);
            text += fmt::format("{}  field (point -> derivative), {} MACs, at most {} evaluations:\n", pad,
                                p.macs_per_field_eval, p.worst_field_evals);
            dump_chain(text, p.field, "point", "derivative", depth + 2);
            break;
        }
        }
    }
}

// A streaming model: h first, then the evolution's, the update's and the
// readout's regions, each from the same base (they run one after another).
void lower_stream(Layout& lay, const Model& model) {
    Lowered& low = lay.out;
    const Stream& st = *model.stream;
    const std::size_t S = static_cast<std::size_t>(std::max(st.state_size, 0));
    const int width = static_cast<int>(S);
    lay.largest_gap = st.largest_gap;
    StreamPlan sp;
    sp.h = lay.take(0, S, "state.h", "the new state (copied to the context when the call succeeds)");
    const std::size_t base = S;
    const Continuous& c = st.evolve;
    if (!c.blend) {
        sp.evolve = lay.continuous(c, base);
    } else if (c.field.size() >= 3) {
        const std::size_t heads = c.field.size() - 3;
        std::size_t at = base;
        if (heads > 0) {
            const std::size_t bw = static_cast<std::size_t>(block_out_width(c.field[heads - 1]));
            sp.bb = lay.take(at, bw, c.name + ".backbone", "the backbone's output, read by the heads");
            at += bw;
        }
        sp.f = lay.take(at, S, c.name + ".f", "head f (the rate)");
        sp.g = lay.take(at + S, S, c.name + ".g", "head g (the start)");
        sp.k = lay.take(at + 2 * S, S, c.name + ".k", "head k (the end)");
        at += 3 * S;
        sp.backbone = lay.chain(c.field.data(), heads, c.name + ".backbone", at, width, false);
        for (std::size_t i = heads; i < c.field.size(); ++i) low.macs_outside_fields += dense_macs(c.field[i].dense);
    }
    if (st.update == Stream::Update::gated) {
        sp.gated = true;
        sp.gi = lay.take(base, 3 * S, st.update_name + ".gi", "W_ih x + b_ih (gates r, z, n)");
        sp.gh = lay.take(base + 3 * S, 3 * S, st.update_name + ".gh", "W_hh h + b_hh (gates r, z, n)");
    } else if (st.update == Stream::Update::merge) {
        sp.hx = lay.take(base, S + static_cast<std::size_t>(std::max(model.input_size, 0)), st.update_name + ".hx",
                         "[h; x], the merge layer's input");
    }
    for_each_dense(st.update_layers, [&](const Dense& d) { low.macs_outside_fields += dense_macs(d); });
    low.top = lay.chain(model.blocks, "readout", base, width, false);
    low.stream = std::move(sp);
}

}  // namespace

Lowered lower_model(const Model& model, Precision precision) {
    Lowered low;
    low.model_name = model.name;
    low.precision = precision;
    low.input_size = model.input_size;
    low.output_size = model.output_size;
    Layout lay{low};
    if (model.stream) {
        lower_stream(lay, model);
    } else {
        low.top = lay.chain(model.blocks, "top", 0, model.input_size, false);
    }
    low.workspace_bytes = low.workspace_size * (precision == Precision::float32 ? 4u : 8u);
    low.parameter_count = count_params(model.blocks);
    if (model.stream)
        low.parameter_count += count_params(model.stream->evolve.field) + count_params(model.stream->update_layers);
    for_each_model_dense(model, [&](const Dense& d) {
        low.parameter_bytes += weight_table_bytes(d, d.storage, precision) +
                               (d.has_bias ? d.out * storage_bytes(WeightStorage::real, precision) : 0);
        low.integer_weights = low.integer_weights || d.storage != WeightStorage::real;
    });
    low.worst_macs += low.macs_outside_fields;
    return low;
}

std::vector<const ContinuousPlan*> continuous_plans(const Lowered& lowered) {
    std::vector<const ContinuousPlan*> out;
    if (lowered.stream && lowered.stream->evolve.block != nullptr) out.push_back(&lowered.stream->evolve);
    collect(lowered.top, out);
    return out;
}

std::string dump_lowered(const Lowered& low) {
    std::string text;
    text += fmt::format("lowered model {} ({})\n", low.model_name,
                        low.precision == Precision::float32 ? "float32" : "float64");
    text += fmt::format("workspace: {} reals, {} bytes\n", low.workspace_size, low.workspace_bytes);
    text += fmt::format("parameters: {}\n", low.parameter_count);
    text += fmt::format("MACs per field evaluation (all fields): {}\n", low.macs_per_field_eval);
    text += fmt::format("MACs outside fields: {}\n", low.macs_outside_fields);
    text += fmt::format("worst-case field evaluations: {}\n", low.worst_field_evals);
    text += fmt::format("worst-case MACs per inference: {}\n", low.worst_macs);
    text += "buffers (offset, size in reals; buffers of blocks that run one after the other share addresses):\n";
    std::size_t name_w = 4;
    for (const Buffer& b : low.buffers) name_w = std::max(name_w, b.name.size());
    for (const Buffer& b : low.buffers)
        text += fmt::format("  {:>6} {:>6}  {:<{}}  {}\n", b.offset, b.size, b.name, name_w, b.role);
    text += "plan:\n";
    if (!low.stream) {
        dump_chain(text, low.top, "input", "output", 1);
        return text;
    }
    const StreamPlan& sp = *low.stream;
    const std::string h = fmt::format("work[{}]", sp.h);
    text += fmt::format("  h = the context's state (copied to work[{}])\n", sp.h);
    if (sp.evolve.block != nullptr) {
        const ContinuousPlan& p = sp.evolve;
        text += fmt::format("  evolution {}: h -> h over [0, gap] ({}; {}); at most {} evaluations at the largest gap\n",
                            p.block->name, p.block->solver.method, p.adaptive ? "adaptive" : "ceil(rate * gap) equal steps",
                            p.worst_field_evals);
        text += fmt::format("    field (point -> derivative), {} MACs:\n", p.macs_per_field_eval);
        dump_chain(text, p.field, "point", "derivative", 3);
    } else {
        text += fmt::format("  blend: backbone {} -> {}, then heads f -> work[{}], g -> work[{}], k -> work[{}]; "
                            "h = s g + (1 - s) k\n",
                            h, sp.backbone.ops.empty() ? h : fmt::format("work[{}]", sp.bb), sp.f, sp.g, sp.k);
        dump_chain(text, sp.backbone, h, fmt::format("work[{}]", sp.bb), 2);
    }
    if (!sp.gated)
        text += fmt::format("  update (merge): [h; input] -> work[{}] -> h\n", sp.hx);
    else
        text += fmt::format("  update (gated): input -> work[{}], h -> work[{}]; GRU gates -> h\n", sp.gi, sp.gh);
    text += "  readout:\n";
    dump_chain(text, low.top, h, "output", 2);
    return text;
}

}  // namespace meander
