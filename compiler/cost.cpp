#include "cost.hpp"

#include <cxxabi.h>
#include <fmt/format.h>
#include <unistd.h>

#include <algorithm>
#include <cstdint>
#include <cstdio>
#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <functional>
#include <map>
#include <memory>
#include <nlohmann/json.hpp>
#include <regex>
#include <set>
#include <sstream>

#include "../runtime/evaluate.hpp"
#include "../runtime/integrate.hpp"
#include "../runtime/tableau.hpp"
#include "emit.hpp"
#include "lower.hpp"

namespace meander {

namespace fs = std::filesystem;

// ---------------------------------------------------------------------------
// Core classes and their figures.
//
// Sources (secondary, collected in the project brief's list of practitioner
// needs): software float with the GCC library on a Cortex-M0: fadd ~100,
// fmul ~170, expf ~1,930 cycles; Cortex-M4 FPU (Cortex-M4 Technical Reference
// Manual, FPU instruction timing): VADD/VMUL 1 cycle, VFMA/VMLA 3 cycles.
// Where no source gives a figure for a core, the nearest sourced figure is
// used as a stated stand-in and the report says so; every figure can be
// overridden. Operand loads, loop overhead and the solver's own vector
// arithmetic are not counted.

namespace {

std::vector<CoreFigures> make_figures() {
    std::vector<CoreFigures> f(4);
    f[0] = {CoreClass::cortex_m0, {"-mcpu=cortex-m0", "-mthumb", "-mfloat-abi=soft"}, false,
            270.0, "software float fmul ~170 + fadd ~100 cycles (GCC library on a Cortex-M0)",
            1930.0, "software expf ~1,930 cycles (GCC library on a Cortex-M0)"};
    f[1] = {CoreClass::cortex_m3, {"-mcpu=cortex-m3", "-mthumb", "-mfloat-abi=soft"}, false,
            270.0, "the Cortex-M0 software float figures (fmul ~170 + fadd ~100), an upper bound: "
                   "no Cortex-M3 figure in our sources",
            1930.0, "the Cortex-M0 software expf figure (~1,930), an upper bound"};
    f[2] = {CoreClass::cortex_m4f, {"-mcpu=cortex-m4", "-mthumb", "-mfpu=fpv4-sp-d16", "-mfloat-abi=hard"}, true,
            3.0, "VFMA.F32 3 cycles (Cortex-M4 Technical Reference Manual, FPU instruction timing)",
            0.0, "no sourced figure for the maths library on this core: activations not counted"};
    f[3] = {CoreClass::cortex_m7, {"-mcpu=cortex-m7", "-mthumb", "-mfpu=fpv5-sp-d16", "-mfloat-abi=hard"}, true,
            3.0, "the Cortex-M4 VFMA.F32 figure (3 cycles), an upper bound: no Cortex-M7 figure in our sources",
            0.0, "no sourced figure for the maths library on this core: activations not counted"};
    return f;
}

}  // namespace

const std::vector<CoreClass>& all_cores() {
    static const std::vector<CoreClass> cores{CoreClass::cortex_m0, CoreClass::cortex_m3, CoreClass::cortex_m4f,
                                              CoreClass::cortex_m7};
    return cores;
}

std::string_view core_name(CoreClass c) {
    switch (c) {
    case CoreClass::cortex_m0: return "cortex-m0";
    case CoreClass::cortex_m3: return "cortex-m3";
    case CoreClass::cortex_m4f: return "cortex-m4f";
    case CoreClass::cortex_m7: return "cortex-m7";
    }
    return "cortex-m4f";
}

std::optional<CoreClass> core_from_name(std::string_view name) {
    for (CoreClass c : all_cores())
        if (core_name(c) == name) return c;
    return std::nullopt;
}

const CoreFigures& core_figures(CoreClass c) {
    static const std::vector<CoreFigures> figures = make_figures();
    return figures[static_cast<std::size_t>(c)];
}

namespace {

// ---------------------------------------------------------------------------
// Counting, from the model.

long dense_params(const Dense& d) { return static_cast<long>(d.out) * d.in_total() + (d.has_bias ? d.out : 0); }

// Activations that go through exp (or tanh) once per element.
bool exp_based(Activation a) {
    switch (a) {
    case Activation::identity:
    case Activation::relu:
    case Activation::leaky_relu: return false;
    default: return true;
    }
}

struct Counts {
    long params = 0;
    long macs = 0;          // one pass (for a field: one evaluation)
    long activations = 0;   // exp-based activation evaluations in one pass
};

void count(const std::vector<Block>& blocks, Counts& c) {
    for (const Block& b : blocks) {
        switch (b.kind) {
        case Block::Kind::dense:
            c.params += dense_params(b.dense);
            c.macs += dense_macs(b.dense);
            if (exp_based(b.dense.act)) c.activations += b.dense.out;
            break;
        case Block::Kind::residual: count(b.residual.body, c); break;
        case Block::Kind::continuous: count(b.continuous.field, c); break;
        }
    }
}

// Every layer and block name inside `blocks` (for attributing buffers and functions).
void names_in(const std::vector<Block>& blocks, std::set<std::string>& out) {
    for (const Block& b : blocks) {
        switch (b.kind) {
        case Block::Kind::dense: out.insert(b.dense.name); break;
        case Block::Kind::residual:
            out.insert(b.residual.name);
            names_in(b.residual.body, out);
            break;
        case Block::Kind::continuous:
            out.insert(b.continuous.name);
            names_in(b.continuous.field, out);
            break;
        }
    }
}

std::string solver_text(const SolverSpec& s, const Tableau* t) {
    if (t != nullptr && t->adaptive())
        return fmt::format("{}, rtol {}, atol {}, max-steps {}", s.method, format_double(s.rtol),
                           format_double(s.atol), s.max_steps);
    return fmt::format("{}, {} step{}", s.method, s.steps, s.steps == 1 ? "" : "s");
}

EvalSpread spread(std::vector<long> v, int failed) {
    EvalSpread s;
    s.rows = static_cast<int>(v.size());
    s.failed_rows = failed;
    if (v.empty()) return s;
    std::sort(v.begin(), v.end());
    s.min = v.front();
    s.max = v.back();
    const std::size_t m = v.size() / 2;
    s.median = v.size() % 2 ? static_cast<double>(v[m]) : 0.5 * static_cast<double>(v[m - 1] + v[m]);
    return s;
}

// Field evaluations of each continuous block for every input row, by running
// the reference evaluator on the model cut after each block: the difference
// of two cuts is what that block took.
struct Measured {
    std::map<std::size_t, std::vector<long>> per_block;  // top-level block index -> evaluations per row
    std::vector<long> total;
    int failed = 0;
};

Measured measure_evals(const Model& model, const std::vector<std::vector<double>>& rows) {
    Measured m;
    std::vector<std::size_t> cuts;
    for (std::size_t i = 0; i < model.blocks.size(); ++i)
        if (model.blocks[i].kind == Block::Kind::continuous) cuts.push_back(i);
    std::vector<Model> prefixes;
    for (std::size_t i : cuts) {
        Model p = model;
        p.blocks.resize(i + 1);
        p.output_size = block_out_width(p.blocks.back());
        prefixes.push_back(std::move(p));
    }
    for (const auto& row : rows) {
        const Eigen::VectorXd in = Eigen::Map<const Eigen::VectorXd>(row.data(), static_cast<Eigen::Index>(row.size()));
        const EvalResult full = evaluate(model, in);
        if (full.status != EvalStatus::ok) ++m.failed;
        m.total.push_back(full.stats.field_evals);
        long before = 0;
        for (std::size_t c = 0; c < cuts.size(); ++c) {
            const long upto = evaluate(prefixes[c], in).stats.field_evals;
            m.per_block[cuts[c]].push_back(upto - before);
            before = upto;
        }
    }
    return m;
}

// ---------------------------------------------------------------------------
// Measuring the emitted object with the cross tools.

bool on_path(const std::string& tool) {
    if (tool.find('/') != std::string::npos) return access(tool.c_str(), X_OK) == 0;
    const char* path = std::getenv("PATH");
    if (path == nullptr) return false;
    std::stringstream dirs(path);
    std::string dir;
    while (std::getline(dirs, dir, ':')) {
        if (dir.empty()) continue;
        const std::string full = dir + "/" + tool;
        if (access(full.c_str(), X_OK) == 0) return true;
    }
    return false;
}

std::string demangle(const std::string& name) {
    int status = 0;
    std::unique_ptr<char, void (*)(void*)> d(abi::__cxa_demangle(name.c_str(), nullptr, nullptr, &status), std::free);
    return status == 0 && d ? std::string(d.get()) : name;
}

struct ObjectSizes {
    long text = 0, rodata = 0, data = 0;
    std::vector<std::pair<std::string, long>> functions;  // mangled name, bytes
};

// `<prefix>size -A` (System V format): one line per section, name and size.
ObjectSizes parse_size_output(const std::string& text) {
    ObjectSizes s;
    std::istringstream lines(text);
    std::string line;
    while (std::getline(lines, line)) {
        std::istringstream f(line);
        std::string section;
        long size = 0;
        if (!(f >> section >> size)) continue;
        auto starts = [&](const char* p) {
            const std::string pre = p;
            return section == pre || section.compare(0, pre.size() + 1, pre + ".") == 0;
        };
        if (starts(".text")) {
            s.text += size;
            if (section.size() > 6 && size > 0) s.functions.emplace_back(section.substr(6), size);
        } else if (starts(".rodata")) {
            s.rodata += size;
        } else if (starts(".data") || starts(".bss")) {
            s.data += size;
        }
    }
    return s;
}

// -fstack-usage: "file:line:col:function<TAB>bytes<TAB>static".
std::map<std::string, long> parse_su(const std::string& text) {
    std::map<std::string, long> frames;
    std::istringstream lines(text);
    std::string line;
    while (std::getline(lines, line)) {
        const auto t1 = line.find('\t');
        if (t1 == std::string::npos) continue;
        const auto t2 = line.find('\t', t1 + 1);
        std::string where = line.substr(0, t1);
        // Strip "file:line:col:" (the file may hold colons only in odd paths; ours do not).
        for (int i = 0; i < 3; ++i) {
            const auto c = where.find(':');
            if (c == std::string::npos) break;
            where.erase(0, c + 1);
        }
        frames[where] = std::atol(line.substr(t1 + 1, t2 - t1 - 1).c_str());
    }
    return frames;
}

// -fcallgraph-info=su (VCG text): nodes with their frame, edges caller -> callee.
struct CallGraph {
    struct Node {
        std::string label;  // demangled name
        long bytes = -1;    // -1: no frame known (outside the object)
    };
    std::map<std::string, Node> nodes;
    std::map<std::string, std::vector<std::string>> edges;
};

CallGraph parse_ci(const std::string& text) {
    CallGraph g;
    static const std::regex node_re(R"re(node: \{ title: "([^"]*)" label: "([^"\\]*)(?:\\n[^"\\]*)?(?:\\n(\d+) bytes \([a-z,]+\))?")re");
    static const std::regex edge_re(R"re(edge: \{ sourcename: "([^"]*)" targetname: "([^"]*)")re");
    std::istringstream lines(text);
    std::string line;
    std::smatch m;
    while (std::getline(lines, line)) {
        if (std::regex_search(line, m, node_re)) {
            CallGraph::Node n;
            n.label = m[2].str();
            if (m[3].matched) n.bytes = std::atol(m[3].str().c_str());
            g.nodes[m[1].str()] = n;
        } else if (std::regex_search(line, m, edge_re)) {
            auto& out = g.edges[m[1].str()];
            if (std::find(out.begin(), out.end(), m[2].str()) == out.end()) out.push_back(m[2].str());
        }
    }
    return g;
}

// Deepest stack from `node`: its frame plus the deepest callee. Emitted code
// has no recursion; `on_path` guards against a cycle anyway.
long deepest(const CallGraph& g, const std::string& node, std::vector<std::string>& chain,
             std::set<std::string>& library, std::set<std::string>& visiting) {
    const auto it = g.nodes.find(node);
    if (it == g.nodes.end() || it->second.bytes < 0) {
        // Outside the emitted object: a library function.
        const std::string label = it == g.nodes.end() ? node : it->second.label;
        static const std::regex builtin(R"(__builtin_(\w+)\()");
        std::smatch m;
        library.insert(std::regex_search(label, m, builtin) ? m[1].str() : node);
        chain.clear();
        return 0;
    }
    if (visiting.count(node)) {
        chain.clear();
        return 0;
    }
    visiting.insert(node);
    long best = 0;
    std::vector<std::string> best_chain;
    const auto e = g.edges.find(node);
    if (e != g.edges.end()) {
        for (const std::string& callee : e->second) {
            std::vector<std::string> sub;
            const long d = deepest(g, callee, sub, library, visiting);
            if (d > best || (d == best && best_chain.empty() && !sub.empty())) {
                best = d;
                best_chain = sub;
            }
        }
    }
    visiting.erase(node);
    chain.clear();
    chain.push_back(it->second.label);
    chain.insert(chain.end(), best_chain.begin(), best_chain.end());
    return it->second.bytes + best;
}

// The block a function belongs to: the one whose own or inner names appear as
// a word of the function's name (split at anything but letters and digits,
// and at underscores for compound names). Ambiguous or none: empty.
std::string attribute(const std::string& function, const std::vector<std::pair<std::string, std::set<std::string>>>& blocks) {
    std::set<std::string> words;
    static const std::regex ident(R"([A-Za-z_][A-Za-z0-9_]*)");
    for (auto it = std::sregex_iterator(function.begin(), function.end(), ident); it != std::sregex_iterator(); ++it) {
        const std::string w = it->str();
        words.insert(w);
        // Every run of '_'-separated parts, so "dense_lift_forward" yields "lift".
        std::vector<std::string> parts;
        std::stringstream ss(w);
        std::string part;
        while (std::getline(ss, part, '_')) parts.push_back(part);
        for (std::size_t i = 0; i < parts.size(); ++i) {
            std::string joined;
            for (std::size_t j = i; j < parts.size(); ++j) {
                joined += (j > i ? "_" : "") + parts[j];
                words.insert(joined);
            }
        }
    }
    std::string found;
    for (const auto& [name, inner] : blocks) {
        bool hit = false;
        for (const std::string& n : inner) hit = hit || words.count(n) > 0;
        if (!hit) continue;
        if (!found.empty()) return "";
        found = name;
    }
    return found;
}

// Estimated .text bytes without a cross compiler: a fixed part (entry point,
// input checks, result names), a part per dense layer and residual sum, and
// per continuous block a part per nonzero tableau coefficient (the emitted
// stage sums are unrolled) plus the step-size controller when adaptive.
// Fitted to samples/ (fan_balance: rk4; soil_probe: bogacki-shampine;
// boiler_ahead: dormand-prince) measured with arm-none-eabi-g++ 12.2 -Os for
// the Cortex-M4F (three points; the per-layer figure was chosen, the others
// solved for); software float cores measured 12-21 % larger. A rough guide
// only: the report marks the result "estimated".
long estimate_code_bytes(const Model& model, CoreClass core) {
    double bytes = 634.0;
    std::function<void(const std::vector<Block>&)> walk = [&](const std::vector<Block>& blocks) {
        for (const Block& b : blocks) {
            switch (b.kind) {
            case Block::Kind::dense: bytes += 40.0; break;
            case Block::Kind::residual: bytes += 20.0; walk(b.residual.body); break;
            case Block::Kind::continuous: {
                const Tableau* t = find_tableau(b.continuous.solver.method);
                if (t != nullptr) {
                    long terms = 0;
                    for (const auto* coefs : {&t->a, &t->b, &t->e})
                        for (const Coefficient& c : *coefs) terms += c.value != 0.0 ? 1 : 0;
                    bytes += 38.5 * static_cast<double>(terms) + (t->adaptive() ? 159.0 : 0.0);
                }
                walk(b.continuous.field);
                break;
            }
            }
        }
    };
    walk(model.blocks);
    if (!core_figures(core).single_fpu) bytes *= 1.15;
    return std::lround(bytes);
}

// Compiles the emitted source for the core and fills code, constants, stack.
bool measure_object(const Model& model, const std::vector<EmittedFile>& files, const CostOptions& opts, CoreClass core,
                    const std::vector<std::pair<std::string, std::set<std::string>>>& block_names, CostReport& rep,
                    Diagnostics& diags) {
    auto folder = WorkFolder::open(opts.keep_dir, "meander-cost", diags);
    if (!folder) return false;
    const fs::path dir_path = folder->path();
    for (const EmittedFile& f : files)
        if (!write_file_atomic((dir_path / f.name).string(), f.text, diags)) return false;

    const std::string cxx = opts.cross_prefix + "g++";
    const std::string size = opts.cross_prefix + "size";
    const fs::path src = dir_path / (model.name + ".cpp");
    const fs::path obj = dir_path / (model.name + ".o");
    std::string flags;
    for (const std::string& f : core_figures(core).cross_flags) flags += f + " ";
    flags += "-std=c++17 -Os -fno-exceptions -fno-rtti -ffunction-sections -fdata-sections";
    const std::string cmd = fmt::format("cd {} && {} {} -fstack-usage -fcallgraph-info=su -c {} -o {} 2>&1", shell_quote(dir_path.string()),
                                        cxx, flags, shell_quote(src.filename().string()), shell_quote(obj.filename().string()));
    const auto build = run_capture(cmd);
    if (!build) {
        diags.error(cxx, "compiling the emitted code for measurement failed");
        return false;
    }
    const auto sizes_text = run_capture(fmt::format("{} -A {} 2>&1", size, shell_quote(obj.string())));
    if (!sizes_text) {
        diags.error(size, "reading the section sizes of the emitted object failed");
        return false;
    }
    const auto version = run_capture(fmt::format("{} -dumpversion 2>/dev/null", cxx));
    std::string ver = version ? *version : "";
    while (!ver.empty() && (ver.back() == '\n' || ver.back() == '\r')) ver.pop_back();

    const ObjectSizes sz = parse_size_output(*sizes_text);
    rep.code_measured = true;
    rep.code_tool = fmt::format("{}{}{} {}", cxx, ver.empty() ? "" : " ", ver, flags);
    rep.code_bytes = sz.text;
    rep.rodata_bytes = sz.rodata;
    rep.data_bytes = sz.data;

    Diagnostics quiet;
    std::map<std::string, long> frames;
    if (auto su = read_file((dir_path / (model.name + ".su")).string(), quiet)) frames = parse_su(*su);
    CallGraph graph;
    if (auto ci = read_file((dir_path / (model.name + ".ci")).string(), quiet)) graph = parse_ci(*ci);
    // Call-graph titles are mangled names, behind "file:" for internal ones.
    std::map<std::string, long> frame_of_symbol;
    for (const auto& [title, node] : graph.nodes)
        if (node.bytes >= 0) frame_of_symbol[title.substr(title.rfind(':') + 1)] = node.bytes;
    for (const auto& [mangled, bytes] : sz.functions) {
        FunctionSize f;
        f.name = demangle(mangled);
        f.code_bytes = bytes;
        const auto fr = frame_of_symbol.find(mangled);
        if (fr != frame_of_symbol.end()) f.stack_bytes = fr->second;
        f.block = attribute(f.name, block_names);
        rep.functions.push_back(f);
    }
    for (BlockCost& b : rep.blocks) {
        for (const FunctionSize& f : rep.functions) {
            if (f.block != b.name) continue;
            b.code_bytes = (b.code_bytes < 0 ? 0 : b.code_bytes) + f.code_bytes;
        }
    }

    // The entry point: `NAME::infer(` in the .su and call-graph files.
    const std::string entry = model.name + "::infer(";
    for (const auto& [fn, bytes] : frames) {
        if (fn.find(entry) == std::string::npos) continue;
        rep.entry_stack_bytes = bytes;
        rep.stack_measured = true;
    }
    for (const auto& [title, node] : graph.nodes) {
        if (node.label.find(entry) == std::string::npos || node.bytes < 0) continue;
        std::set<std::string> library, visiting;
        rep.stack_bytes = deepest(graph, title, rep.stack_chain, library, visiting);
        rep.library_calls.assign(library.begin(), library.end());
    }
    if (rep.stack_bytes < 0 && rep.entry_stack_bytes >= 0) {
        rep.stack_bytes = rep.entry_stack_bytes;
        rep.stack_chain = {entry};
    }
    return true;
}

// workspace_size from the emitted header ("inline constexpr std::size_t workspace_size = N;").
std::optional<long> header_workspace_size(const std::vector<EmittedFile>& files, const std::string& header) {
    static const std::regex re(R"(constexpr\s+std::size_t\s+workspace_size\s*=\s*(\d+)\s*;)");
    for (const EmittedFile& f : files) {
        if (f.name != header) continue;
        std::smatch m;
        if (std::regex_search(f.text, m, re)) return std::atol(m[1].str().c_str());
    }
    return std::nullopt;
}

}  // namespace

std::optional<CostReport> measure_cost(const Model& model, const CostOptions& opts, Diagnostics& diags) {
    const std::optional<CoreClass> core = core_from_name(opts.core);
    if (!core) {
        diags.error("cost", fmt::format("unknown core class '{}' (known: cortex-m0, cortex-m3, cortex-m4f, cortex-m7)",
                                        opts.core));
        return std::nullopt;
    }
    CostReport rep;
    rep.model = model.name;
    rep.precision = opts.precision;
    rep.core = *core;
    rep.real_bytes = opts.precision == Precision::float32 ? 4 : 8;

    for (const auto& row : opts.inputs) {
        if (static_cast<int>(row.size()) != model.input_size) {
            diags.error("cost", fmt::format("an input row has {} values, the model's input has {}", row.size(),
                                            model.input_size));
            return std::nullopt;
        }
    }

    const Lowered low = lower_model(model, opts.precision);
    Measured measured;
    if (!opts.inputs.empty()) measured = measure_evals(model, opts.inputs);

    std::vector<std::pair<std::string, std::set<std::string>>> block_names;
    for (std::size_t i = 0; i < model.blocks.size(); ++i) {
        const Block& b = model.blocks[i];
        BlockCost bc;
        bc.name = block_name(b);
        Counts c;
        count({b}, c);
        bc.parameters = c.params;
        bc.weight_bytes = c.params * rep.real_bytes;
        bc.macs = c.macs;
        bc.activations = c.activations;
        switch (b.kind) {
        case Block::Kind::dense: bc.kind = "dense"; break;
        case Block::Kind::residual: bc.kind = "residual"; break;
        case Block::Kind::continuous: {
            bc.kind = "continuous";
            const Continuous& cb = b.continuous;
            const Tableau* t = find_tableau(cb.solver.method);
            bc.solver = solver_text(cb.solver, t);
            bc.adaptive = t != nullptr && t->adaptive();
            bc.macs_per_field_eval = field_macs(cb);
            bc.field_evals = worst_field_evals(cb.solver);
            bc.macs = bc.macs_per_field_eval * bc.field_evals;
            bc.activations = c.activations * bc.field_evals;
            if (!opts.inputs.empty()) bc.measured = spread(measured.per_block[i], measured.failed);
            rep.any_adaptive = rep.any_adaptive || bc.adaptive;
            break;
        }
        }
        std::set<std::string> inner;
        names_in({b}, inner);
        // The block's own buffers (its name, or an inner block's, before the first '.').
        std::size_t lo = SIZE_MAX, hi = 0;
        for (const Buffer& buf : low.buffers) {
            if (!inner.count(buf.name.substr(0, buf.name.find('.')))) continue;
            lo = std::min(lo, buf.offset);
            hi = std::max(hi, buf.offset + buf.size);
        }
        bc.workspace_bytes = lo < hi ? static_cast<long>(hi - lo) * rep.real_bytes : 0;
        if (i == 0) {
            // The top chain's buffers, which carry results from block to block.
            for (const Buffer& buf : low.buffers)
                if (buf.name.rfind("top.", 0) == 0) rep.shared_workspace_bytes += static_cast<long>(buf.size) * rep.real_bytes;
        }
        block_names.emplace_back(bc.name, inner);

        rep.parameters += bc.parameters;
        rep.weight_bytes += bc.weight_bytes;
        rep.macs += bc.macs;
        rep.activations += bc.activations;
        if (b.kind == Block::Kind::continuous) {
            rep.macs_per_field_eval += bc.macs_per_field_eval;
            rep.field_evals += bc.field_evals;
        } else {
            rep.macs_outside_fields += bc.macs;
        }
        rep.blocks.push_back(std::move(bc));
    }
    if (!opts.inputs.empty()) rep.measured = spread(measured.total, measured.failed);

    EmitOptions eo = opts.emit;
    eo.precision = opts.precision;
    eo.self_test_inputs.clear();
    eo.self_test_outputs.clear();
    if (eo.meander_version.empty()) eo.meander_version = MEANDER_VERSION;
    const std::vector<EmittedFile> files = emit_model(model, eo);
    const auto ws = header_workspace_size(files, model.name + ".hpp");
    if (!ws) {
        diags.error("cost", fmt::format("the emitted header {}.hpp declares no workspace_size", model.name));
        return std::nullopt;
    }
    rep.workspace_bytes = *ws * rep.real_bytes;
    // context = { real work[workspace_size > 0 ? workspace_size : 1]; counters count; }:
    // three 32-bit counters after the array, padded to the array's alignment.
    rep.context_bytes = std::max<long>(rep.workspace_bytes, rep.real_bytes) + 12;
    if (rep.context_bytes % rep.real_bytes) rep.context_bytes += rep.real_bytes - rep.context_bytes % rep.real_bytes;

    const bool tools = !opts.cross_prefix.empty() && on_path(opts.cross_prefix + "g++") && on_path(opts.cross_prefix + "size");
    if (tools) {
        if (!measure_object(model, files, opts, rep.core, block_names, rep, diags)) return std::nullopt;
    } else {
        rep.code_bytes = estimate_code_bytes(model, rep.core);
    }

    const CoreFigures& chosen = core_figures(rep.core);
    rep.cycles_per_mac_overridden = opts.cycles_per_mac >= 0.0;
    rep.cycles_per_mac = rep.cycles_per_mac_overridden ? opts.cycles_per_mac : chosen.cycles_per_mac;
    std::vector<CoreClass> order{rep.core};
    for (CoreClass c : all_cores())
        if (c != rep.core) order.push_back(c);
    for (CoreClass c : order) {
        const CoreFigures& f = core_figures(c);
        CoreCycles cc;
        cc.core = c;
        const bool chosen_core = c == rep.core;
        cc.cycles_per_mac = chosen_core ? rep.cycles_per_mac : f.cycles_per_mac;
        cc.cycles_per_activation = f.cycles_per_activation;
        // The sourced figures are for float32; double precision has none
        // unless the user gives one for the chosen core.
        cc.estimated = opts.precision == Precision::float32 || (chosen_core && rep.cycles_per_mac_overridden);
        if (opts.precision == Precision::float64) cc.cycles_per_activation = 0.0;
        if (cc.estimated) {
            cc.worst = static_cast<double>(rep.macs) * cc.cycles_per_mac +
                       static_cast<double>(rep.activations) * cc.cycles_per_activation;
            if (rep.measured) {
                // The median evaluations replace the worst case in the continuous blocks' share.
                double macs = static_cast<double>(rep.macs_outside_fields);
                double acts = 0.0;
                for (const BlockCost& b : rep.blocks) {
                    if (b.kind != "continuous") {
                        acts += static_cast<double>(b.activations);
                        continue;
                    }
                    const double n = b.measured ? b.measured->median : static_cast<double>(b.field_evals);
                    macs += static_cast<double>(b.macs_per_field_eval) * n;
                    acts += b.field_evals > 0 ? static_cast<double>(b.activations) / static_cast<double>(b.field_evals) * n : 0.0;
                }
                cc.median = macs * cc.cycles_per_mac + acts * cc.cycles_per_activation;
            }
        }
        rep.cycles.push_back(cc);
    }
    return rep;
}

// ---------------------------------------------------------------------------
// Rendering.

namespace {

std::string precision_name(Precision p) { return p == Precision::float32 ? "float32" : "float64"; }

std::string num(long v) { return v < 0 ? "-" : fmt::format("{}", v); }

std::string spread_text(const EvalSpread& s) {
    return fmt::format("{} / {} / {}", s.min, format_double(s.median), s.max);
}

// A table with a header row; the first column left-aligned, the rest right.
std::string table(const std::vector<std::vector<std::string>>& rows, std::size_t left_columns = 1) {
    std::vector<std::size_t> w;
    for (const auto& r : rows) {
        if (w.size() < r.size()) w.resize(r.size(), 0);
        for (std::size_t i = 0; i < r.size(); ++i) w[i] = std::max(w[i], r[i].size());
    }
    std::string out;
    for (const auto& r : rows) {
        std::string line = "  ";
        for (std::size_t i = 0; i < r.size(); ++i) {
            if (i) line += "  ";
            line += i < left_columns ? fmt::format("{:<{}}", r[i], w[i]) : fmt::format("{:>{}}", r[i], w[i]);
        }
        while (!line.empty() && line.back() == ' ') line.pop_back();
        out += line + "\n";
    }
    return out;
}

std::string cycles_text(double c) { return fmt::format("{:.0f}", c); }

// "ns::result ns::infer(context&, const real*, real*)" -> "ns::infer": the
// qualified name without return type and parameters, for narrow tables.
std::string short_name(const std::string& full) {
    std::string s = full;
    const std::string anon = "(anonymous namespace)";
    for (auto at = s.find(anon); at != std::string::npos; at = s.find(anon)) s.replace(at, anon.size(), "{anonymous}");
    s = s.substr(0, s.find('('));
    int depth = 0;
    for (std::size_t i = s.size(); i-- > 0;) {
        if (s[i] == '>' || s[i] == '}') ++depth;
        if (s[i] == '<' || s[i] == '{') --depth;
        if (s[i] == ' ' && depth == 0) return s.substr(i + 1);
    }
    return s;
}

}  // namespace

std::string render_cost_text(const CostReport& r) {
    std::string t;
    t += fmt::format("cost of {} ({}, {} bytes per real; code for {})\n\n", r.model, precision_name(r.precision),
                     r.real_bytes, core_name(r.core));

    std::vector<std::vector<std::string>> rows;
    rows.push_back({"block", "kind", "parameters", "weights B", "code B", "RAM B", "MACs/eval", "evals", "MACs"});
    for (const BlockCost& b : r.blocks) {
        const bool cont = b.kind == "continuous";
        rows.push_back({b.name, b.kind, num(b.parameters), num(b.weight_bytes), num(b.code_bytes),
                        num(b.workspace_bytes), cont ? num(b.macs_per_field_eval) : "-",
                        cont ? fmt::format("{}{}", b.field_evals, b.adaptive ? " max" : "") : "-", num(b.macs)});
    }
    if (r.shared_workspace_bytes > 0)
        rows.push_back({"(between blocks)", "", "", "", "", num(r.shared_workspace_bytes), "", "", ""});
    rows.push_back({"total", "", num(r.parameters), num(r.weight_bytes),
                    fmt::format("{}{}", r.code_bytes, r.code_measured ? "" : " est."), num(r.workspace_bytes),
                    num(r.macs_per_field_eval), fmt::format("{}{}", r.field_evals, r.any_adaptive ? " max" : ""),
                    num(r.macs)});
    t += table(rows, 2);
    t += "\n  code B: functions named after the block (code inlined into infer counts in the total only).\n"
         "  RAM B: the block's own buffers; blocks that run one after the other share them,\n"
         "  so the total is the workspace, not the sum. evals: field evaluations per inference\n"
         "  (exact for fixed step; \"max\": the bound max-steps allows). MACs: per inference.\n";

    bool any_measured = r.measured.has_value();
    if (any_measured) {
        t += fmt::format("\nfield evaluations measured over {} input rows (min / median / max){}:\n", r.measured->rows,
                         r.measured->failed_rows ? fmt::format(", {} rows ended with a result other than ok",
                                                               r.measured->failed_rows)
                                                 : "");
        std::vector<std::vector<std::string>> m;
        for (const BlockCost& b : r.blocks)
            if (b.measured) m.push_back({b.name, b.solver, spread_text(*b.measured)});
        m.push_back({"total", "", spread_text(*r.measured)});
        t += table(m, 2);
    }

    t += "\nflash\n";
    if (r.code_measured) {
        t += fmt::format("  code       {:>8} B  .text of the emitted object, measured with\n", r.code_bytes);
        t += fmt::format("                          {}\n", r.code_tool);
        t += fmt::format("  constants  {:>8} B  .rodata (weights {} B, plus coefficients and names)\n", r.rodata_bytes,
                         r.weight_bytes);
        t += fmt::format("  globals    {:>8} B  .data and .bss\n", r.data_bytes);
    } else {
        t += fmt::format("  code       {:>8} B  estimated (no cross compiler on PATH)\n", r.code_bytes);
        t += fmt::format("  weights    {:>8} B  parameters x {} bytes\n", r.weight_bytes, r.real_bytes);
    }
    t += "RAM\n";
    t += fmt::format("  workspace  {:>8} B  workspace_bytes of the emitted header\n", r.workspace_bytes);
    t += fmt::format("  context    {:>8} B  workspace and counters, caller owned\n", r.context_bytes);
    if (r.stack_measured) {
        t += fmt::format("  stack      {:>8} B  deepest chain of emitted functions from infer (-fstack-usage,\n"
                         "                          -fcallgraph-info); infer's own frame {} B\n",
                         r.stack_bytes, r.entry_stack_bytes);
        if (r.stack_chain.size() > 1) {
            std::vector<std::string> names;
            for (const std::string& f : r.stack_chain) names.push_back(short_name(f));
            t += fmt::format("                          chain: {}\n", fmt::join(names, " -> "));
        }
        if (!r.library_calls.empty())
            t += fmt::format("                          plus the library's own frames: {}\n", fmt::join(r.library_calls, ", "));
    } else {
        t += "  stack             -    not measured (no cross compiler on PATH)\n";
    }

    if (!r.functions.empty()) {
        t += "\ncode by function\n";
        std::vector<std::vector<std::string>> f;
        f.push_back({"function", "block", "code B", "frame B"});
        for (const FunctionSize& fn : r.functions)
            f.push_back({short_name(fn.name), fn.block.empty() ? "-" : fn.block, num(fn.code_bytes), num(fn.stack_bytes)});
        t += table(f, 2);
    }

    t += fmt::format("\nestimated cycles per inference = MACs x cycles/MAC + exp-based activations x cycles each\n"
                     "({} activation evaluations, worst case; loads, loop and solver overhead not counted)\n",
                     r.activations);
    std::vector<std::vector<std::string>> c;
    c.push_back({"core", "cycles/MAC", "cycles/activation", "worst", r.measured ? "median" : ""});
    for (const CoreCycles& cc : r.cycles) {
        if (!cc.estimated) {
            c.push_back({std::string(core_name(cc.core)), "-", "-", "no figure", ""});
            continue;
        }
        // No sourced figure: say so instead of a 0 that reads as "free".
        c.push_back({std::string(core_name(cc.core)), format_double(cc.cycles_per_mac),
                     cc.cycles_per_activation > 0 ? format_double(cc.cycles_per_activation) : "not counted",
                     cycles_text(cc.worst),
                     cc.median ? cycles_text(*cc.median) : ""});
    }
    t += table(c, 1);
    t += "figures:\n";
    for (const CoreCycles& cc : r.cycles) {
        if (!cc.estimated) continue;
        const CoreFigures& f = core_figures(cc.core);
        const bool user = cc.core == r.core && r.cycles_per_mac_overridden;
        t += fmt::format("  {}: per MAC: {}\n", core_name(cc.core), user ? "given by the user" : f.mac_source);
        if (r.precision == Precision::float32)
            t += fmt::format("  {:{}}  per activation: {}\n", "", core_name(cc.core).size(), f.activation_source);
    }
    if (r.precision == Precision::float64)
        t += "  float64: the sourced figures are for float32; give cycles per MAC for an estimate\n";
    t += "  (secondary sources, as collected for the project; check them for your part)\n";
    return t;
}

std::string render_cost_json(const CostReport& r) {
    using json = nlohmann::ordered_json;
    auto opt_num = [](long v) { return v < 0 ? json(nullptr) : json(v); };
    auto spread_json = [](const EvalSpread& s) {
        return json{{"rows", s.rows}, {"failed_rows", s.failed_rows}, {"min", s.min}, {"median", s.median}, {"max", s.max}};
    };
    json j;
    j["model"] = r.model;
    j["precision"] = precision_name(r.precision);
    j["core"] = core_name(r.core);
    j["real_bytes"] = r.real_bytes;
    json blocks = json::array();
    for (const BlockCost& b : r.blocks) {
        json o{{"name", b.name}, {"kind", b.kind}, {"parameters", b.parameters}, {"weight_bytes", b.weight_bytes},
               {"code_bytes", opt_num(b.code_bytes)}, {"workspace_bytes", b.workspace_bytes}, {"macs", b.macs},
               {"activations", b.activations}};
        if (b.kind == "continuous") {
            o["solver"] = b.solver;
            o["adaptive"] = b.adaptive;
            o["macs_per_field_eval"] = b.macs_per_field_eval;
            o["field_evals"] = b.field_evals;
            if (b.measured) o["field_evals_measured"] = spread_json(*b.measured);
        }
        blocks.push_back(o);
    }
    j["blocks"] = blocks;
    json total{{"parameters", r.parameters},
               {"weight_bytes", r.weight_bytes},
               {"code_bytes", r.code_bytes},
               {"code_measured", r.code_measured},
               {"rodata_bytes", opt_num(r.rodata_bytes)},
               {"data_bytes", opt_num(r.data_bytes)},
               {"workspace_bytes", r.workspace_bytes},
               {"workspace_between_blocks_bytes", r.shared_workspace_bytes},
               {"context_bytes", r.context_bytes},
               {"stack_bytes", opt_num(r.stack_bytes)},
               {"entry_stack_bytes", opt_num(r.entry_stack_bytes)},
               {"macs_per_field_eval", r.macs_per_field_eval},
               {"macs_outside_fields", r.macs_outside_fields},
               {"field_evals", r.field_evals},
               {"field_evals_worst_case", r.any_adaptive},
               {"macs", r.macs},
               {"activations", r.activations}};
    if (r.measured) total["field_evals_measured"] = spread_json(*r.measured);
    j["total"] = total;
    if (r.code_measured) j["code_tool"] = r.code_tool;
    if (r.stack_measured) {
        j["stack_chain"] = r.stack_chain;
        j["library_calls"] = r.library_calls;
    }
    json fns = json::array();
    for (const FunctionSize& f : r.functions)
        fns.push_back({{"name", f.name}, {"block", f.block.empty() ? json(nullptr) : json(f.block)},
                       {"code_bytes", f.code_bytes}, {"stack_bytes", opt_num(f.stack_bytes)}});
    j["functions"] = fns;
    json cyc = json::array();
    for (const CoreCycles& cc : r.cycles) {
        const CoreFigures& f = core_figures(cc.core);
        const bool user = cc.core == r.core && r.cycles_per_mac_overridden;
        json o{{"core", core_name(cc.core)}, {"estimated", cc.estimated}};
        if (cc.estimated) {
            o["cycles_per_mac"] = cc.cycles_per_mac;
            o["cycles_per_activation"] = cc.cycles_per_activation;
            o["worst"] = cc.worst;
            if (cc.median) o["median"] = *cc.median;
        }
        o["mac_source"] = user ? "given by the user" : f.mac_source;
        o["activation_source"] = f.activation_source;
        cyc.push_back(o);
    }
    j["cycles"] = cyc;
    return j.dump(2) + "\n";
}

}  // namespace meander
