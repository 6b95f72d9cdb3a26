// Internal: the formatting helpers and the style sheet of the HTML report's page
// (report_html.cpp).
#pragma once

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <string>
#include <string_view>
#include <vector>

#include "tidemark/call.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/report_html.hpp"
#include "tidemark/track.hpp"

namespace tidemark::report_detail {

inline std::string esc(std::string_view s) {
    return html_escape(s);
}

// 1234567 -> "1,234,567".
inline std::string grouped(int64_t v) {
    std::string digits = std::to_string(v < 0 ? -v : v);
    std::string out;
    for (size_t i = 0; i < digits.size(); ++i) {
        if (i > 0 && (digits.size() - i) % 3 == 0) out += ',';
        out += digits[i];
    }
    return v < 0 ? "-" + out : out;
}

// Base counts for axes: 0, 500, 1 kb, 2.5 kb, 10 Mb.
inline std::string bases_label(double v) {
    const auto trim = [](std::string s) {
        if (s.find('.') != std::string::npos) {
            while (s.back() == '0') s.pop_back();
            if (s.back() == '.') s.pop_back();
        }
        return s;
    };
    if (v >= 1e6) return trim(fmt::format("{:.2f}", v / 1e6)) + " Mb";
    if (v >= 1e3) return trim(fmt::format("{:.2f}", v / 1e3)) + " kb";
    return trim(fmt::format("{:.0f}", v));
}

// A step of 1, 2 or 5 x 10^k giving at most `most` intervals over [0, span].
inline double nice_step(double span, int most) {
    if (span <= 0) return 1;
    double step = std::pow(10.0, std::floor(std::log10(span / most)));
    for (const double m : {1.0, 2.0, 5.0, 10.0})
        if (span / (step * m) <= most) return step * m;
    return step * 10;
}

inline std::string num(double v, int decimals) {
    return std::isfinite(v) ? fmt::format("{:.{}f}", v, decimals) : "NA";
}

// SVG coordinates with one decimal (enough at screen resolution; keeps the file small).
inline std::string px(double v) {
    std::string s = fmt::format("{:.1f}", v);
    if (s.size() > 2 && s.compare(s.size() - 2, 2, ".0") == 0) s.resize(s.size() - 2);
    if (s == "-0") s = "0";
    return s;
}

inline std::string rgb(const Model& model, int region) {
    return "rgb(" + region_color(model, region) + ")";
}

// A name cut to about `most` bytes in the middle (at UTF-8 character boundaries), so that both
// its start and its end (where drafts keep the contig number and coverage) stay readable.
inline std::string shortened(const std::string& name, size_t most) {
    if (name.size() <= most || most < 3) return name;
    const auto boundary = [&](size_t i) {
        while (i > 0 && i < name.size() && (static_cast<unsigned char>(name[i]) & 0xC0) == 0x80)
            --i;
        return i;
    };
    const size_t head = boundary((most - 1) / 2);
    const size_t tail = boundary(name.size() - (most - 1 - (most - 1) / 2));
    return name.substr(0, head) + "\u2026" + name.substr(tail);
}

inline const char* criteria_name(IslandCriteria c) {
    switch (c) {
        case IslandCriteria::ggf1987:
            return "ggf1987 (Gardiner-Garden &amp; Frommer 1987)";
        case IslandCriteria::tj2002:
            return "tj2002 (Takai &amp; Jones 2002)";
        default:
            return "none";
    }
}

// A stepped outline of stacked values along x: the top of layer k over bins [x_i, x_{i+1}).
// Consecutive bins of the same height share one segment.
inline std::string step_area(const std::vector<double>& xs, const std::vector<double>& lower,
                             const std::vector<double>& upper, double y0, double height) {
    const size_t n = upper.size();
    if (n == 0) return "";
    const auto y = [&](double v) { return px(y0 + height * (1.0 - std::clamp(v, 0.0, 1.0))); };
    std::string d = "M" + px(xs[0]) + " " + y(lower[0]);
    std::string last_y;
    // Upper edge, left to right.
    for (size_t i = 0; i < n; ++i) {
        const std::string yi = y(upper[i]);
        if (yi != last_y) d += "V" + yi;
        d += "H" + px(xs[i + 1]);
        last_y = yi;
    }
    // Lower edge, right to left.
    for (size_t i = n; i-- > 0;) {
        const std::string yi = y(lower[i]);
        if (yi != last_y) d += "V" + yi;
        d += "H" + px(xs[i]);
        last_y = yi;
    }
    return d + "Z";
}

// Stacked step areas of several layers over bins [x_i, x_{i+1}), one path per layer and run of
// drawable bins: a bin is left empty (nothing is drawn inside assembly gaps) when `drawable` is
// false or a layer's value is not a number.
inline std::string stacked_areas(const std::vector<double>& xs,
                                 const std::vector<std::vector<double>>& layers,
                                 const std::vector<char>& drawable, double y0, double height,
                                 const std::vector<std::string>& colours,
                                 const std::string& extra = "") {
    std::string out;
    const size_t n = xs.empty() ? 0 : xs.size() - 1;
    const auto ok = [&](size_t i) {
        if (!drawable[i]) return false;
        for (const auto& l : layers)
            if (!std::isfinite(l[i])) return false;
        return true;
    };
    for (size_t b = 0; b < n;) {
        if (!ok(b)) {
            ++b;
            continue;
        }
        size_t e = b;
        while (e < n && ok(e)) ++e;
        const std::vector<double> run_x(xs.begin() + static_cast<std::ptrdiff_t>(b),
                                        xs.begin() + static_cast<std::ptrdiff_t>(e) + 1);
        std::vector<double> lower(e - b, 0.0);
        for (size_t k = 0; k < layers.size(); ++k) {
            std::vector<double> upper(lower);
            for (size_t i = b; i < e; ++i) upper[i - b] += layers[k][i];
            out += "<path d=\"" + step_area(run_x, lower, upper, y0, height) + "\" fill=\"" +
                   colours[k] + "\"" + extra + "/>\n";
            lower = std::move(upper);
        }
        b = e;
    }
    return out;
}

inline constexpr const char* style_sheet = R"css(
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif;color:#1d1d1f;background:#fff;margin:0;line-height:1.45}
main{max-width:1120px;margin:0 auto;padding:18px 24px 40px}
header{border-bottom:3px solid #1d1d1f;margin-bottom:8px}
h1{font-size:26px;margin:0 0 2px}
h2{font-size:19px;margin:26px 0 8px;border-bottom:1px solid #ddd;padding-bottom:3px}
h3{font-size:15px;margin:14px 0 6px}
p.lead{margin:0 0 10px;color:#444;font-size:15px}
table{border-collapse:collapse;margin:6px 0 8px;font-size:13.5px}
th,td{padding:3px 10px;border-bottom:1px solid #e4e4e4;text-align:left;vertical-align:top}
th{background:#f4f4f4;font-weight:600}
tr.num td{text-align:right;font-variant-numeric:tabular-nums}
tr.num td.txt{text-align:left}
tr.total td{font-weight:600;border-top:2px solid #bbb}
table.kv th{width:90px;background:none;color:#555}
table.kv td code{word-break:break-all}
code{font-family:ui-monospace,"DejaVu Sans Mono",Menlo,Consolas,monospace;font-size:12.5px;background:#f6f6f6;padding:1px 3px}
.dim{color:#777}
.note{color:#555;font-size:13px;margin:4px 0 8px}
b.sw{font-size:17px;line-height:1;margin-right:5px;vertical-align:-2px;font-weight:normal}
p.legend{font-size:13px;margin:6px 0}
p.legend span{margin-right:18px}
b.unk{color:#c2c2c2}
.figs{display:flex;flex-wrap:wrap;gap:8px 18px}
svg{display:block;font-family:inherit}
svg text{fill:#333}
svg .tick{font-size:11px;fill:#555}
svg .lab{font-size:12px}
svg .sub{font-size:11px;fill:#666}
svg .ttl{font-size:13px;font-weight:600}
svg .grid{stroke:#e6e6e6;stroke-width:1}
svg .axis{stroke:#888;stroke-width:1}
svg .thr{stroke:#333;stroke-width:1;stroke-dasharray:4 3}
svg .band{fill:#fafafa}
svg .trace{fill:none;stroke:#333;stroke-width:1.2}
svg .seq{fill:#d9d9d9}
svg rect.unk{fill:#9a9a9a;fill-opacity:.45}
details{font-size:13px;margin:6px 0}
div.wide{overflow-x:auto}
th{white-space:nowrap}
.warn{border:2px solid #b3261e;background:#fdf0ee;padding:8px 14px;margin:10px 0 6px;font-size:14px}
.warn h2{font-size:16px;margin:0 0 4px;border:none;padding:0;color:#b3261e}
.warn ul{margin:0;padding-left:20px}
td.pos{white-space:nowrap}
div.scroll{max-height:520px;overflow-y:auto;border:1px solid #e4e4e4}
div.scroll table{margin:0}
div.scroll th{position:sticky;top:0}
footer{margin-top:30px;color:#777;font-size:12px;border-top:1px solid #ddd;padding-top:6px}
)css";

}  // namespace tidemark::report_detail
