// The standardisation mistakes of `check --expect`: standardisation missing,
// made with other tensors, or doubled. See expect_mistakes.hpp.
#include <fmt/format.h>

#include <algorithm>
#include <cctype>
#include <cmath>

#include "expect_mistakes.hpp"

namespace meander {

namespace {

// At most this many loose tensors of one length are paired (the first in file
// order): k tensors give up to k (k - 1) pairings, each a run over every row.
constexpr std::size_t kMostTensorsPaired = 8;

enum class Role { mean, scale, variance, unknown };

// What a tensor's name says it holds, by its words ("norm.running_var": var; "x_std": std).
Role role_of(const std::string& name) {
    // Words split at non-letters and at a camelCase hump: "runningVar" and
    // "RUNNINGVar" read as running, var ("XMean" as x, mean).
    std::vector<std::string> words;
    std::string word;
    const std::string text = name + ".";
    const auto at = [&](std::size_t i) { return i < text.size() ? static_cast<unsigned char>(text[i]) : 0; };
    const auto upper = [&](std::size_t i) { return std::isupper(at(i)) != 0; };
    const auto lower_or_digit = [&](std::size_t i) { return std::islower(at(i)) != 0 || std::isdigit(at(i)) != 0; };
    for (std::size_t i = 0; i < text.size(); ++i) {
        const bool hump = i > 0 && upper(i) && (lower_or_digit(i - 1) || (upper(i - 1) && std::islower(at(i + 1)) != 0));
        if (!word.empty() && (hump || std::isalnum(at(i)) == 0)) {
            words.push_back(word);
            word.clear();
        }
        if (std::isalnum(at(i)) != 0) word += static_cast<char>(std::tolower(at(i)));
    }
    auto ends = [](const std::string& w, const char* tail) {
        const std::string t(tail);
        return w.size() >= t.size() && w.compare(w.size() - t.size(), t.size(), t) == 0;
    };
    for (const auto& w : words)
        if (w == "var" || w == "vars" || w == "variance" || w == "variances") return Role::variance;
    for (const auto& w : words)
        if (w == "sd" || ends(w, "std") || ends(w, "stds") || ends(w, "stdev") || ends(w, "stddev") || ends(w, "sigma") ||
            ends(w, "scale") || ends(w, "scales"))
            return Role::scale;
    for (const auto& w : words)
        if (w == "mu" || w == "loc" || w == "avg" || w == "average" || w == "center" || w == "centre" || w == "offset" ||
            w == "shift" || ends(w, "mean") || ends(w, "means"))
            return Role::mean;
    return Role::unknown;
}

// A name for a variance's square root: its last 'variance' or 'var', in any case, becomes
// 'std' in the same case ("running_var" -> "running_std", "Running_Var" -> "Running_Std",
// "X_VAR" -> "X_STD"); role_of reads the words whatever their case, so must this.
std::string root_name(const std::string& variance) {
    std::string lower;
    for (char c : variance) lower += static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
    for (const std::string word : {"variance", "var"}) {
        const std::size_t at = lower.rfind(word);
        if (at == std::string::npos) continue;
        const auto upper = [&](std::size_t i) { return std::isupper(static_cast<unsigned char>(variance[at + i])) != 0; };
        const char* std_word = upper(0) && upper(1) && upper(2) ? "STD" : upper(0) ? "Std" : "std";
        return variance.substr(0, at) + std_word + variance.substr(at + word.size());
    }
    return variance + "_std";
}

// One side of the model: the input or the output vector.
struct Side {
    const char* kind;          // "input", "output"
    const std::string* name;
    int size;
    Loc loc;                   // the vector's name in its statement
    const VectorInfo* info;
    int group;
    bool input;
};

std::string escaped(const std::string& s) {
    std::string out;
    for (char c : s) {
        if (c == '"' || c == '\\') out += '\\';
        out += c;
    }
    return out;
}

// The standardisation clause as the description writes it.
std::string clause(const std::string& mean, const std::string& scale) {
    return fmt::format("standardised mean \"{}\" scale \"{}\"", escaped(mean), escaped(scale));
}

std::string written_clause(const Standardised& s) {
    if (s.mean_tensor.empty() || s.scale_tensor.empty()) return "standardised mean [...] scale [...]";
    return clause(s.mean_tensor, s.scale_tensor);
}

// The whole statement with `standardisation` in place of any standardisation it has:
// `input reading[4], names [a in "A", b], standardised mean "x_mean" scale "x_std"`.
std::string statement(const Side& side, const std::string& standardisation) {
    std::string s = fmt::format("{} {}[{}]", side.kind, *side.name, side.size);
    const VectorInfo& info = *side.info;
    if (!info.names.empty()) {
        s += ", names [";
        for (std::size_t i = 0; i < info.names.size(); ++i) {
            s += (i ? ", " : "") + info.names[i];
            if (i < info.units.size() && !info.units[i].empty()) s += fmt::format(" in \"{}\"", escaped(info.units[i]));
        }
        s += "]";
    }
    return s + ", " + standardisation;
}

void set_standardisation(Model& m, bool input, Standardised st) {
    (input ? m.input_info : m.output_info).standardised = std::move(st);
}

void add_pairings(const Side& side, const std::vector<Tensor>& loose, std::vector<Mistake>& out) {
    std::vector<const Tensor*> pool;
    for (const Tensor& t : loose)
        if (t.values.size() == static_cast<std::size_t>(side.size) && pool.size() < kMostTensorsPaired) pool.push_back(&t);
    const std::optional<Standardised>& now = side.info->standardised;
    for (const Tensor* mean : pool) {
        const Role mr = role_of(mean->name);
        if (mr == Role::scale || mr == Role::variance) continue;
        for (const Tensor* scale : pool) {
            const Role sr = role_of(scale->name);
            if (scale == mean || sr == Role::mean) continue;
            if (now && now->mean_tensor == mean->name && now->scale_tensor == scale->name) continue;  // as written
            const bool variance = sr == Role::variance;
            Eigen::VectorXd s(side.size);
            bool usable = true;
            for (int i = 0; i < side.size; ++i) {
                const double v = scale->values[static_cast<std::size_t>(i)];
                s[i] = variance ? std::sqrt(v) : v;
                usable = usable && std::isfinite(s[i]) && s[i] > 0.0;  // a scale divides, and a spread is positive
            }
            if (!usable) continue;
            Standardised st;
            st.mean_tensor = mean->name;
            st.scale_tensor = scale->name;
            st.mean = Eigen::Map<const Eigen::VectorXd>(mean->values.data(), side.size);
            st.scale = s;
            const std::string scale_text =
                variance ? fmt::format("the square root of '{}'", scale->name) : fmt::format("'{}'", scale->name);
            Mistake m;
            m.what = fmt::format("the {} '{}' standardised with mean '{}' and scale {}{}", side.kind, *side.name,
                                 mean->name, scale_text, now ? " in place of the description's" : "");
            const std::string instead = now ? fmt::format(", in place of '{}'", written_clause(*now)) : std::string();
            if (variance) {
                // The statement takes a scale, not a variance: the square root has to be saved as a tensor.
                const std::string root = root_name(scale->name);
                m.advice.emplace_back(
                    side.loc,
                    fmt::format("{} '{}': the trained network {} with the mean '{}' and a scale that is the square root "
                                "of the variance '{}' (tried without any eps a normalisation layer adds): save sqrt({} + eps) "
                                "as a tensor, say '{}', and write '{}'{}",
                                side.kind, *side.name, side.input ? "standardises it" : "gives it as y * scale + mean",
                                mean->name, scale->name, scale->name, root, statement(side, clause(mean->name, root)),
                                instead));
            } else {
                m.advice.emplace_back(side.loc, fmt::format("{} '{}': the trained network {} with the mean '{}' and the "
                                                            "scale '{}': write '{}'{}",
                                                            side.kind, *side.name, side.input ? "standardises it"
                                                                : "gives it as y * scale + mean",
                                                            mean->name, scale->name,
                                                            statement(side, clause(mean->name, scale->name)), instead));
            }
            m.undo = [input = side.input, st](Model& model) { set_standardisation(model, input, st); };
            m.group = side.group;
            out.push_back(std::move(m));
        }
    }
}

void add_dropped(const Side& side, std::vector<Mistake>& out) {
    if (!side.info->standardised) return;
    const Standardised& now = *side.info->standardised;
    Mistake m;
    m.what = fmt::format("the {} '{}' not standardised", side.kind, *side.name);
    m.advice.emplace_back(
        now.loc,
        side.input
            ? fmt::format("input '{}': the expected outputs are the network's for the rows as they stand, not standardised: "
                          "if the trained network takes them so, drop '{}' from the statement; if the rows were "
                          "standardised already, give --input the raw ones",
                          *side.name, written_clause(now))
            : fmt::format("output '{}': the expected outputs are the last layer's values, not brought back to the output's "
                          "units: if the trained network gives them so, drop '{}' from the statement; if the trainer wrote "
                          "standardised outputs, write them as y * scale + mean",
                          *side.name, written_clause(now)));
    m.undo = [input = side.input](Model& model) { (input ? model.input_info : model.output_info).standardised.reset(); };
    m.group = side.group;
    out.push_back(std::move(m));
}

}  // namespace

std::vector<Mistake> standardisation_mistakes(const Model& model, const std::vector<Tensor>& loose) {
    std::vector<Mistake> out;
    const Side in{"input", &model.input_name, model.input_size, model.input_loc, &model.input_info, 100, true};
    add_dropped(in, out);
    add_pairings(in, loose, out);
    // Class scores and probabilities are never standardised (check_vectors.cpp refuses it).
    const bool softmax_head = !model.blocks.empty() && model.blocks.back().kind == Block::Kind::dense &&
                              model.blocks.back().dense.act == Activation::softmax;
    if (softmax_head || !model.output_info.classes.empty()) return out;
    const Side output{"output", &model.output_name, model.output_size, model.output_loc, &model.output_info, 101, false};
    add_dropped(output, out);
    add_pairings(output, loose, out);
    return out;
}

}  // namespace meander
