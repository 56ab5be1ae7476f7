// Emit, learning on the device (compiler/learn.hpp's plan): the parameter block,
// a forward pass that keeps what the reverse pass needs, the reverse pass
// (dense layers, residual blocks, fixed-step continuous blocks through their
// steps or by the adjoint method), the losses and the SGD step.
//
// The reverse pass mirrors runtime/gradient.cpp, runtime/vjp.cpp,
// runtime/backprop.cpp and runtime/adjoint.cpp operation for operation where
// they are element-wise (gradient accumulation, Runge-Kutta combinations), so
// float64 results differ from the runtime's only through the sums the runtime
// leaves to Eigen (W^T g, dot products). The workspace is laid out here, at
// compile time: every buffer is a fixed offset in learn_context::work; nothing
// is allocated and no function calls itself.
#include <fmt/format.h>

#include <algorithm>

#include "../../runtime/integrate.hpp"
#include "../format.hpp"
#include "learn_render.hpp"

namespace meander::emit_detail::learning {


// ---- layout ------------------------------------------------------------------------

long dense_macs(const Dense& d) { return static_cast<long>(d.out) * d.in_total(); }

long LearnRender::chain_macs_forward(const std::vector<Block>& blocks) const {
    long m = 0;
    for_each_dense(blocks, [&](const Dense& d) { m += dense_macs(d); });
    return m;
}

long LearnRender::chain_macs_backward(const std::vector<Block>& blocks) const {
    long m = 0;
    for_each_dense(blocks, [&](const Dense& d) {
        const LearnLayer* l = plan_.find(d);
        m += static_cast<long>(d.out) * d.in + (l && l->weight ? dense_macs(d) : 0);
    });
    return m;
}

void LearnRender::layout_chain(LChain& c, const std::vector<Block>& blocks, const std::string& in, int in_width) {
    std::string x = in;
    int width = in_width;
    std::size_t widest = static_cast<std::size_t>(in_width);
    for (const Block& b : blocks) {
        LNode nd;
        nd.b = &b;
        nd.x = x;
        nd.in = width;
        nd.out = block_out_width(b);
        widest = std::max(widest, static_cast<std::size_t>(nd.out));
        if (b.kind == Block::Kind::dense) {
            nd.z = take(static_cast<std::size_t>(nd.out));
            nd.y = take(static_cast<std::size_t>(nd.out));
            widest_out_ = std::max(widest_out_, static_cast<std::size_t>(nd.out));
        } else if (b.kind == Block::Kind::residual) {
            layout_chain(nd.body, b.residual.body, x, width);
            nd.gbar = take(static_cast<std::size_t>(width));
            nd.y = take(static_cast<std::size_t>(nd.out));
        } else {
            nd.y = take(static_cast<std::size_t>(nd.out));
            layout_continuous(nd);
        }
        x = W(nd.y);
        width = nd.out;
        c.nodes.push_back(std::move(nd));
    }
    c.bar[0] = take(widest);
    c.bar[1] = take(widest);
}

void LearnRender::layout_continuous(LNode& nd) {
    const Continuous& c = nd.b->continuous;
    const Tableau& tb = *find_tableau(c.solver.method);
    const std::size_t s = static_cast<std::size_t>(tb.stages);
    const std::size_t N = static_cast<std::size_t>(c.solver.steps);
    nd.n = static_cast<std::size_t>(c.state());
    // The field's learnable values, contiguous in the block (for_each_dense order).
    bool first = true;
    for_each_dense(c.field, [&](const Dense& d) {
        const LearnLayer* l = plan_.find(d);
        if (!l || !l->any()) return;
        const std::size_t at = l->weight ? l->weight_at : l->bias_at;
        if (first) nd.fbase = at;
        first = false;
        nd.fcount += (l->weight ? static_cast<std::size_t>(d.out * d.in_total()) : 0) +
                     (l->bias ? static_cast<std::size_t>(d.out) : 0);
    });
    if (plan_.way == LearnSpec::Way::steps) {
        nd.states = take(N * nd.n);
        nd.k = take(s * nd.n);
        nd.arg = take((s > 1 ? s - 1 : 1) * nd.n);
        nd.kbar = take(s * nd.n);
        nd.ybar = take(nd.n);
        nd.ynb = take(nd.n);
        nd.argbar = take(nd.n);
    } else {
        nd.m = 2 * nd.n + nd.fcount;
        nd.az = take(nd.m);
        nd.k = take(s * nd.m);
        nd.arg = take(nd.m);
        nd.gtmp = take(nd.fcount);
        nd.ybtmp = take(nd.n);
    }
    // The field's own record (one evaluation at a time) after the block's buffers.
    layout_chain(nd.body, c.field, "x", c.state());
}

void LearnRender::layout() {
    if (laid_out_) return;
    laid_out_ = true;
    const Model& m = e_.model;
    std::string in = "input";
    int width = m.input_size;
    // infer's order (compiler/emit/entry.cpp): the input standardised before the first layer.
    if (m.input_info.standardised) {
        std_in_ = take(static_cast<std::size_t>(m.input_size));
        in = W(std_in_);
    }
    if (plan_.first_block > 0) {
        width = block_out_width(m.blocks[plan_.first_block - 1]);
        region_in_ = take(static_cast<std::size_t>(width));
        in = W(region_in_);
    }
    // The region: the top-level blocks from the first that holds a learnable layer.
    {
        std::string x = in;
        std::size_t widest = static_cast<std::size_t>(width);
        for (std::size_t i = plan_.first_block; i < m.blocks.size(); ++i) {
            const Block& b = m.blocks[i];
            LNode nd;
            nd.b = &b;
            nd.x = x;
            nd.in = width;
            nd.out = block_out_width(b);
            widest = std::max(widest, static_cast<std::size_t>(nd.out));
            if (b.kind == Block::Kind::dense) {
                nd.z = take(static_cast<std::size_t>(nd.out));
                nd.y = take(static_cast<std::size_t>(nd.out));
                widest_out_ = std::max(widest_out_, static_cast<std::size_t>(nd.out));
            } else if (b.kind == Block::Kind::residual) {
                layout_chain(nd.body, b.residual.body, x, width);
                nd.gbar = take(static_cast<std::size_t>(width));
                nd.y = take(static_cast<std::size_t>(nd.out));
            } else {
                nd.y = take(static_cast<std::size_t>(nd.out));
                layout_continuous(nd);
            }
            x = W(nd.y);
            width = nd.out;
            region_.nodes.push_back(std::move(nd));
        }
        region_.bar[0] = take(widest);
        region_.bar[1] = take(widest);
    }
    obar_ = take(static_cast<std::size_t>(m.output_size));
    if (m.output_info.standardised) std_out_ = take(static_cast<std::size_t>(m.output_size));
    gz_ = take(widest_out_);

    // Work per learning step: the prefix as inference, the region forward and back.
    long prefix_fe = 0;
    for (std::size_t i = 0; i < plan_.first_block; ++i) {
        const Block& b = m.blocks[i];
        if (b.kind == Block::Kind::continuous) prefix_fe += worst_field_evals(b.continuous.solver);
        macs_ += b.kind == Block::Kind::continuous
                     ? chain_macs_forward(b.continuous.field) * worst_field_evals(b.continuous.solver)
                     : chain_macs_forward(std::vector<Block>{b});
    }
    field_evals_ = prefix_fe;
    for (const LNode& nd : region_.nodes) {
        const Block& b = *nd.b;
        if (b.kind != Block::Kind::continuous) {
            const std::vector<Block> one{b};
            macs_ += chain_macs_forward(one) + chain_macs_backward(one);
            continue;
        }
        const Continuous& c = b.continuous;
        const Tableau& tb = *find_tableau(c.solver.method);
        const long N = c.solver.steps, s = tb.stages;
        const long fwd = chain_macs_forward(c.field), bwd = chain_macs_backward(c.field);
        if (plan_.way == LearnSpec::Way::steps) {
            long used = 0;  // stages whose reverse runs (a stage nothing uses is skipped)
            for (long i = 0; i < s; ++i) {
                bool live = tb.b[static_cast<std::size_t>(i)].value != 0.0;
                for (long l = i + 1; l < s; ++l)
                    live = live || tb.a_at(static_cast<int>(l), static_cast<int>(i)) != 0.0;
                used += live ? 1 : 0;
            }
            // forward N*s; reverse: the step's stages but the last again, and a recorded evaluation per live stage
            field_evals_ += N * s + N * (s - 1) + N * used;
            macs_ += (N * s + N * (s - 1) + N * used) * fwd + N * used * bwd;
        } else {
            field_evals_ += N * s + N * s;
            macs_ += (N * s + N * s) * fwd + N * s * bwd;
        }
    }
}

// ---- pointers into the parameter block, flash and the gradient ----------------------

std::string LearnRender::weight_ptr(const Dense& d) const {
    const LearnLayer* l = plan_.find(d);
    if (l && l->weight) return fmt::format("p.value + {}", l->weight_at);
    return "w_" + d.name;
}
std::string LearnRender::bias_ptr(const Dense& d) const {
    const LearnLayer* l = plan_.find(d);
    if (l && l->bias) return fmt::format("p.value + {}", l->bias_at);
    return "b_" + d.name;
}
std::string LearnRender::grad_ptr(const Dense& d, bool weight, const std::string& g, std::size_t base) const {
    const LearnLayer* l = plan_.find(d);
    if (!l || (weight ? !l->weight : !l->bias)) return "nullptr";
    return fmt::format("{} + {}", g, (weight ? l->weight_at : l->bias_at) - base);
}

std::string LearnRender::source() {
    layout();
    std::string o;
    o += "// ---- Learning on the device ----\n\nnamespace {\n\n";
    std::string rest = render_dense_kernels();
    rest += render_fields();
    rest += render_prefix();
    rest += render_passes();
    o += render_derivatives(rest);
    o += rest;
    o += "}  // namespace\n\n";
    o += render_entries();
    return o;
}

}  // namespace meander::emit_detail::learning

namespace meander {

LearnFigures learn_figures(const Model& model, const EmitOptions& opts) {
    const emit_detail::Emission e(model, opts);
    return emit_detail::learning::LearnRender(e).figures();
}

}  // namespace meander

namespace meander::emit_detail {

std::string render_learn_header(const Emission& e) { return e.opts.learn ? learning::LearnRender(e).header() : std::string(); }
std::string render_learn_source(const Emission& e) { return e.opts.learn ? learning::LearnRender(e).source() : std::string(); }

bool learn_needs_log(const Emission& e) { return e.opts.learn && e.opts.learn->loss == LearnLoss::cross_entropy; }

std::set<Activation> learn_kernel_needs(const Emission& e) {
    std::set<Activation> extra;
    if (!e.opts.learn) return extra;
    // Only the layers the backward pass differentiates (from the first learnable block on):
    // a frozen layer before it needs no derivative, and an unused kernel is a clang warning.
    const std::size_t first = std::min(e.opts.learn->first_block, e.model.blocks.size());
    const std::vector<Block> differentiated(e.model.blocks.begin() + static_cast<std::ptrdiff_t>(first),
                                            e.model.blocks.end());
    for_each_dense(differentiated, [&](const Dense& d) {
        if (d.act == Activation::softplus || d.act == Activation::silu) extra.insert(Activation::sigmoid);
        if (d.act == Activation::gelu) extra.insert(Activation::tanh);
    });
    return extra;
}

}  // namespace meander::emit_detail
