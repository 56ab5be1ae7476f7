#include "cost_object.hpp"

#include <cxxabi.h>
#include <fmt/format.h>
#include <unistd.h>

#include <algorithm>
#include <cstdlib>
#include <filesystem>
#include <map>
#include <memory>
#include <regex>
#include <sstream>

namespace meander {

namespace fs = std::filesystem;


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

namespace {

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

}  // namespace

// Compiles the emitted source for the core and fills code, constants, stack.
bool measure_object(const Model& model, const std::vector<EmittedFile>& files, const CostOptions& opts, CoreClass core,
                    const BlockNames& block_names, CostReport& rep, Diagnostics& diags) {
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

    // The entry point: `NAME::infer(` (a streaming model: `NAME::observe(`) in the .su and call-graph files.
    const std::string entry = model.name + (model.stream ? "::observe(" : "::infer(");
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

}  // namespace meander
