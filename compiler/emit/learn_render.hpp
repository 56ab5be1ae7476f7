// Emit, learning on the device: the plan of the emitted learning code shared by
// its files (learn.cpp: the workspace layout and the source's order;
// learn_passes.cpp: the forward and reverse passes; learn_entries.cpp: the entry
// points and the header's declarations).
#pragma once

#include <string>
#include <vector>

#include "render.hpp"

namespace meander::emit_detail::learning {

struct LNode;

// A chain of layers (the region of the top level, a residual body, a field):
// its layers and two buffers for dL/d(results between them).
struct LChain {
    std::vector<LNode> nodes;
    std::size_t bar[2] = {0, 0};
};

struct LNode {
    const Block* b = nullptr;
    std::string x;                  // pointer expression of the input
    int in = 0, out = 0;
    std::size_t y = 0;              // output
    std::size_t z = 0;              // dense: before the activation
    LChain body;                    // residual: g
    std::size_t gbar = 0;           // residual: dL/dg's input
    // continuous
    std::size_t n = 0;
    std::size_t states = 0;         // steps: the state at the start of every step
    std::size_t k = 0;              // stage derivatives (steps: n each; adjoint: m each)
    std::size_t arg = 0;            // stage arguments (steps: stages 2..s, n each; adjoint: one of m)
    std::size_t kbar = 0, ybar = 0, ynb = 0, argbar = 0;  // steps
    std::size_t az = 0, gtmp = 0, ybtmp = 0;               // adjoint: [y, a, g], scratch
    std::size_t m = 0;              // adjoint: 2n + learnable values of the field
    std::size_t fbase = 0;          // the field's first learnable value in the parameter block
    std::size_t fcount = 0;         // the field's learnable values
};

class LearnRender {
public:
    explicit LearnRender(const Emission& e) : e_(e), plan_(*e.opts.learn) {}

    std::string header();
    std::string source();
    LearnFigures figures() {
        layout();
        LearnFigures f;
        f.learnable_count = plan_.count;
        f.workspace_size = top_;
        f.field_evals = field_evals_;
        f.macs = macs_;
        for (const LNode& nd : region_.nodes) f.through_continuous = f.through_continuous || nd.b->kind == Block::Kind::continuous;
        return f;
    }

private:
    const Emission& e_;
    const LearnPlan& plan_;
    std::size_t top_ = 0;           // workspace allocated so far
    std::size_t gz_ = 0;            // dL/dz of one dense layer
    std::size_t widest_out_ = 1;
    std::size_t region_in_ = 0;     // the region's input when the prefix computes it
    std::size_t obar_ = 0;          // dL/doutput (of the network's last layer when the output is standardised)
    std::size_t std_in_ = 0;        // the standardised input, when the input is standardised
    std::size_t std_out_ = 0;       // the output, when it is standardised (the last layer's y * scale + mean)
    LChain region_;
    long field_evals_ = 0;          // per learning step
    long macs_ = 0;                 // per learning step
    bool laid_out_ = false;

    std::string L(double v) const { return e_.L(v); }
    std::size_t take(std::size_t n) {
        const std::size_t at = top_;
        top_ += std::max<std::size_t>(n, 1);
        return at;
    }
    static std::string W(std::size_t off) { return fmt::format("w + {}", off); }

    void layout();
    void layout_chain(LChain& c, const std::vector<Block>& blocks, const std::string& in, int in_width);
    void layout_continuous(LNode& nd);
    long chain_macs_forward(const std::vector<Block>& blocks) const;
    long chain_macs_backward(const std::vector<Block>& blocks) const;

    std::string weight_ptr(const Dense& d) const;
    std::string bias_ptr(const Dense& d) const;
    std::string grad_ptr(const Dense& d, bool weight, const std::string& g, std::size_t base) const;

    std::string render_dense_kernels();
    std::string render_dense_forward(const Dense& d);
    std::string render_dense_backward(const Dense& d);
    std::string render_derivatives(const std::string& uses);
    void fwd_chain(std::string& o, const LChain& c, const std::string& t, const std::string& pad, bool top);
    void bwd_chain(std::string& o, const LChain& c, const std::string& ybar, const std::string& xbar,
                   const std::string& g, std::size_t base, const std::string& t, const std::string& pad, bool top);
    std::string render_fields();
    void fwd_continuous(std::string& o, const LNode& nd, const std::string& pad);
    void bwd_continuous(std::string& o, const LNode& nd, const std::string& ybar, const std::string& xbar,
                        const std::string& pad);
    std::string render_prefix();
    std::string render_passes();
    std::string render_entries();
};

// Multiply-accumulates of a dense layer (its inputs, time included, times its outputs).
long dense_macs(const Dense& d);

// W(r, c) of a layer: the parameter block holds it row by row; flash holds a
// frozen layer in blocks of kDenseBlockRows rows, interleaved within a block,
// the rows left over a last block interleaved alike (compiler/emit/weights.cpp).
struct RowAddr {
    std::string base;   // pointer to W(r, 0) for the row variable `r`
    std::string step;   // distance between W(r, c) and W(r, c + 1)
};

RowAddr row_addr(const Dense& d, bool learnable);

}  // namespace meander::emit_detail::learning
