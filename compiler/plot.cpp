#include "plot.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <map>

#include "format.hpp"

namespace meander {

namespace {

constexpr double kWidth = 720, kHeight = 420;           // one panel
constexpr double kLeft = 80, kRight = 190, kTop = 40, kBottom = 50;
constexpr const char* kColours[] = {"#1f5fa8", "#c8501e", "#2e8b3a", "#8a3ca8", "#b08a12", "#137a7a", "#a01e4c", "#555555"};

std::string esc(const std::string& s) {
    std::string o;
    for (char c : s) {
        if (c == '&') o += "&amp;";
        else if (c == '<') o += "&lt;";
        else if (c == '>') o += "&gt;";
        else if (c == '"') o += "&quot;";
        else o += c;
    }
    return o;
}

// The y value of a candidate: the metric under the metric rule, else the deviation.
bool y_of(const TuneReport& r, const TuneCandidate& k, double& y) {
    if (!k.ok) return false;
    y = r.metric_slack && k.metric ? k.metric->score : k.deviation;
    return std::isfinite(y);
}

struct Axis {
    double lo = 0, hi = 1;          // decades: log10 of the ends
    double map(double v, double a, double b) const { return a + (std::log10(v) - lo) / (hi - lo) * (b - a); }
};

Axis decades(double lo, double hi) {
    Axis a;
    a.lo = std::floor(std::log10(lo));
    a.hi = std::ceil(std::log10(hi));
    if (a.hi <= a.lo) a.hi = a.lo + 1;
    return a;
}

std::string panel(const TuneReport& r, const TuneBlock& b, double y0) {
    const double floor_y = 1e-16;   // an exact result (deviation 0) sits on the floor
    std::vector<const TuneCandidate*> all;
    for (const auto& k : b.candidates) all.push_back(&k);
    all.push_back(&b.deployed);
    double xmin = HUGE_VAL, xmax = 0, ymin = HUGE_VAL, ymax = 0;
    for (const TuneCandidate* k : all) {
        const double x = static_cast<double>(std::max(1L, k->worst_field_evals));
        xmin = std::min(xmin, x);
        xmax = std::max(xmax, x);
        double y = 0;
        if (y_of(r, *k, y)) {
            y = std::max(y, floor_y);
            ymin = std::min(ymin, y);
            ymax = std::max(ymax, y);
        }
    }
    const bool by_metric = r.metric_slack.has_value();
    const double target = by_metric && b.deployed.metric ? b.deployed.metric->score * (1.0 + *r.metric_slack) : r.target;
    if (target > 0) {
        ymin = std::min(ymin, target);
        ymax = std::max(ymax, target);
    }
    if (!(ymax > 0)) ymin = ymax = 1;
    const Axis ax = decades(xmin, xmax * 1.0001), ay = decades(ymin, ymax * 1.0001);
    const double px0 = kLeft, px1 = kWidth - kRight, py0 = y0 + kHeight - kBottom, py1 = y0 + kTop;
    const auto X = [&](double v) { return ax.map(v, px0, px1); };
    const auto Y = [&](double v) { return ay.map(std::max(v, floor_y), py0, py1); };
    std::string s;
    s += fmt::format("<g class=\"block\" id=\"block-{}\">\n", esc(b.name));
    s += fmt::format("<text x=\"{}\" y=\"{}\" font-size=\"15\" font-weight=\"bold\">block {}: {} against cost</text>\n", px0,
                     y0 + 22, esc(b.name), by_metric ? "held-out " + metric_name(r.classification) : std::string("deviation"));
    s += fmt::format("<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#444\"/>\n", px0, py1,
                     px1 - px0, py0 - py1);
    for (double d = ax.lo; d <= ax.hi + 1e-9; d += 1) {
        const double x = X(std::pow(10.0, d));
        s += fmt::format("<line x1=\"{0:.1f}\" y1=\"{1}\" x2=\"{0:.1f}\" y2=\"{2}\" stroke=\"#ddd\"/>\n", x, py0, py1);
        s += fmt::format("<text x=\"{:.1f}\" y=\"{}\" font-size=\"11\" text-anchor=\"middle\">{}</text>\n", x, py0 + 16,
                         format_double(std::pow(10.0, d)));
    }
    const int ystep = ay.hi - ay.lo > 8 ? 2 : 1;
    for (double d = ay.lo; d <= ay.hi + 1e-9; d += ystep) {
        const double y = Y(std::pow(10.0, d));
        s += fmt::format("<line x1=\"{0}\" y1=\"{1:.1f}\" x2=\"{2}\" y2=\"{1:.1f}\" stroke=\"#ddd\"/>\n", px0, y, px1);
        s += fmt::format("<text x=\"{}\" y=\"{:.1f}\" font-size=\"11\" text-anchor=\"end\">1e{}</text>\n", px0 - 6, y + 4,
                         static_cast<int>(d));
    }
    s += fmt::format("<text x=\"{}\" y=\"{}\" font-size=\"12\" text-anchor=\"middle\">field evaluations per inference "
                     "(worst case, log scale)</text>\n",
                     (px0 + px1) / 2, py0 + 36);
    s += fmt::format("<text x=\"{}\" y=\"{}\" font-size=\"12\" text-anchor=\"middle\" transform=\"rotate(-90 {} {})\">{} "
                     "(log scale)</text>\n",
                     18, (py0 + py1) / 2, 18, (py0 + py1) / 2,
                     by_metric ? esc(metric_name(r.classification)) : std::string("deviation from the reference"));
    if (target > 0)
        s += fmt::format("<line class=\"target\" x1=\"{0}\" y1=\"{1:.1f}\" x2=\"{2}\" y2=\"{1:.1f}\" stroke=\"#900\" "
                         "stroke-dasharray=\"6 4\"/><text x=\"{3}\" y=\"{4:.1f}\" font-size=\"11\" fill=\"#900\">target {5}</text>\n",
                         px0, Y(target), px1, px1 + 6, Y(target) + 4, format_double(target));
    // Series: candidates grouped by method, in sweep order.
    std::vector<std::string> methods;
    for (const auto& k : b.candidates)
        if (std::find(methods.begin(), methods.end(), k.spec.method) == methods.end()) methods.push_back(k.spec.method);
    for (std::size_t mi = 0; mi < methods.size(); ++mi) {
        const char* colour = kColours[mi % std::size(kColours)];
        std::string line;
        for (const auto& k : b.candidates) {
            double y = 0;
            if (k.spec.method == methods[mi] && y_of(r, k, y))
                line += fmt::format("{}{:.1f},{:.1f}", line.empty() ? "" : " ", X(static_cast<double>(std::max(1L, k.worst_field_evals))), Y(y));
        }
        if (!line.empty())
            s += fmt::format("<polyline class=\"series\" fill=\"none\" stroke=\"{}\" stroke-width=\"1.5\" points=\"{}\"/>\n",
                             colour, line);
        for (std::size_t i = 0; i < b.candidates.size(); ++i) {
            const TuneCandidate& k = b.candidates[i];
            if (k.spec.method != methods[mi]) continue;
            const double x = X(static_cast<double>(std::max(1L, k.worst_field_evals)));
            const std::string title = esc(format_solver(k.spec)) +
                                      (k.ok ? fmt::format(": {} evaluations, {} {:.3e}", k.worst_field_evals,
                                                          by_metric ? metric_name(r.classification) : "deviation",
                                                          by_metric && k.metric ? k.metric->score : k.deviation)
                                            : ": fails, " + esc(k.failure));
            double y = 0;
            if (y_of(r, k, y))
                s += fmt::format("<circle class=\"candidate\" cx=\"{:.1f}\" cy=\"{:.1f}\" r=\"3.5\" fill=\"{}\"><title>{}</title></circle>\n",
                                 x, Y(y), colour, title);
            else  // a failing budget: a cross on the top edge
                s += fmt::format("<path class=\"candidate failed\" d=\"M{0:.1f},{1:.1f} l6,6 m0,-6 l-6,6\" stroke=\"{2}\" "
                                 "transform=\"translate(-3,-3)\"><title>{3}</title></path>\n",
                                 x, py1, colour, title);
            if (b.chosen && *b.chosen == i && y_of(r, k, y))
                s += fmt::format("<circle class=\"recommended\" cx=\"{0:.1f}\" cy=\"{1:.1f}\" r=\"8\" fill=\"none\" stroke=\"#000\" "
                                 "stroke-width=\"2\"/><text x=\"{0:.1f}\" y=\"{2:.1f}\" font-size=\"11\" text-anchor=\"middle\">"
                                 "recommended</text>\n",
                                 x, Y(y), Y(y) + 22);
        }
        s += fmt::format("<line x1=\"{0}\" y1=\"{1}\" x2=\"{2}\" y2=\"{1}\" stroke=\"{3}\" stroke-width=\"2\"/><text x=\"{4}\" "
                         "y=\"{5}\" font-size=\"12\">{6}</text>\n",
                         px1 + 10, py1 + 20 + 18 * static_cast<double>(mi), px1 + 30, colour, px1 + 36,
                         py1 + 24 + 18 * static_cast<double>(mi), esc(methods[mi]));
    }
    double y = 0;
    if (y_of(r, b.deployed, y)) {
        const double x = X(static_cast<double>(std::max(1L, b.deployed.worst_field_evals)));
        s += fmt::format("<rect class=\"deployed\" x=\"{:.1f}\" y=\"{:.1f}\" width=\"10\" height=\"10\" fill=\"none\" "
                         "stroke=\"#000\" stroke-width=\"2\"><title>deployed: {}</title></rect>"
                         "<text x=\"{:.1f}\" y=\"{:.1f}\" font-size=\"11\" text-anchor=\"middle\">deployed</text>\n",
                         x - 5, Y(y) - 5, esc(format_solver(b.deployed.spec)), x, Y(y) - 10);
    }
    s += "</g>\n";
    return s;
}

}  // namespace

std::string render_tune_svg(const TuneReport& r) {
    const double h = kHeight * static_cast<double>(std::max<std::size_t>(1, r.blocks.size()));
    std::string s = fmt::format("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n"
                                "<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\" width=\"{0}\" height=\"{1}\" "
                                "viewBox=\"0 0 {0} {1}\" font-family=\"sans-serif\">\n"
                                "<title>meander tune: {2}</title>\n<rect width=\"100%\" height=\"100%\" fill=\"#fff\"/>\n",
                                kWidth, h, esc(r.model));
    if (r.blocks.empty())
        s += fmt::format("<text x=\"20\" y=\"40\" font-size=\"14\">{}: no continuous block, no solver to tune</text>\n", esc(r.model));
    for (std::size_t i = 0; i < r.blocks.size(); ++i) s += panel(r, r.blocks[i], kHeight * static_cast<double>(i));
    s += "</svg>\n";
    return s;
}

}  // namespace meander
