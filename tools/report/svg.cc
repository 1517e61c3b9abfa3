#include "tools/report/svg.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

namespace sprig::bench::svg {
namespace {

constexpr double kWidth = 600, kHeight = 320;
constexpr double kLeft = 70, kRight = 20, kTop = 36, kBottom = 56;

std::string Num(double v) {
  char b[32];
  std::snprintf(b, sizeof b, "%.1f", v);
  return b;
}

// A tick label: short and exact enough to read.
std::string Label(double v) {
  char b[32];
  const double a = std::fabs(v);
  if (a >= 1e9) {
    std::snprintf(b, sizeof b, "%gG", v / 1e9);
  } else if (a >= 1e6) {
    std::snprintf(b, sizeof b, "%gM", v / 1e6);
  } else if (a >= 1e4) {
    std::snprintf(b, sizeof b, "%gk", v / 1e3);
  } else {
    std::snprintf(b, sizeof b, "%g", v);
  }
  return b;
}

// Round tick steps (1, 2 or 5 times a power of ten) giving about `count` ticks.
double NiceStep(double range, int count) {
  if (range <= 0) return 1;
  const double raw = range / count;
  const double p = std::pow(10.0, std::floor(std::log10(raw)));
  for (double m : {1.0, 2.0, 5.0, 10.0}) {
    if (m * p >= raw) return m * p;
  }
  return 10 * p;
}

struct Frame {
  double x0, x1, y0, y1;
  bool log_x;
  double X(double x) const {
    const double a = log_x ? std::log10(x) : x, lo = log_x ? std::log10(x0) : x0,
                 hi = log_x ? std::log10(x1) : x1;
    return kLeft + (hi > lo ? (a - lo) / (hi - lo) : 0.5) * (kWidth - kLeft - kRight);
  }
  double Y(double y) const {
    return kHeight - kBottom - (y1 > y0 ? (y - y0) / (y1 - y0) : 0.5) * (kHeight - kTop - kBottom);
  }
};

std::string Open(const Axes& a) {
  return "<svg xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 " + Num(kWidth) + " " +
         Num(kHeight) + "\" width=\"" + Num(kWidth) + "\" height=\"" + Num(kHeight) +
         "\" font-family=\"sans-serif\" font-size=\"12\">" +
         "<rect width=\"100%\" height=\"100%\" fill=\"#fff\"/>" + "<text x=\"" + Num(kWidth / 2) +
         "\" y=\"20\" text-anchor=\"middle\" font-size=\"14\" "
         "font-weight=\"bold\">" +
         Escape(a.title) + "</text>";
}

std::string Text(double x, double y, const std::string& s, const char* anchor,
                 const std::string& extra = "") {
  return "<text x=\"" + Num(x) + "\" y=\"" + Num(y) + "\" text-anchor=\"" + anchor + "\"" + extra +
         ">" + Escape(s) + "</text>";
}

std::string Line(double x0, double y0, double x1, double y1, const std::string& style) {
  return "<line x1=\"" + Num(x0) + "\" y1=\"" + Num(y0) + "\" x2=\"" + Num(x1) + "\" y2=\"" +
         Num(y1) + "\" " + style + "/>";
}

// Axes, grid, tick labels and axis titles.
std::string Decorate(const Axes& a, const Frame& f) {
  std::string s;
  const double step = NiceStep(f.y1 - f.y0, 5);
  for (double y = std::ceil(f.y0 / step) * step; y <= f.y1 + step * 1e-9; y += step) {
    s += Line(kLeft, f.Y(y), kWidth - kRight, f.Y(y), "stroke=\"#e4e4e4\"");
    s += Text(kLeft - 6, f.Y(y) + 4, Label(y), "end");
  }
  if (!a.x_categories.empty()) {
    for (size_t i = 0; i < a.x_categories.size(); ++i) {
      s += Text(f.X(static_cast<double>(i)), kHeight - kBottom + 18, a.x_categories[i], "middle");
    }
  } else if (f.log_x) {
    for (double d = std::pow(10.0, std::floor(std::log10(f.x0))); d <= f.x1; d *= 10) {
      for (double m : {1.0, 2.0, 5.0}) {
        const double x = d * m;
        if (x < f.x0 || x > f.x1) continue;
        s += Line(f.X(x), kTop, f.X(x), kHeight - kBottom, "stroke=\"#eeeeee\"");
        s += Text(f.X(x), kHeight - kBottom + 18, Label(x), "middle");
      }
    }
  } else {
    const double xs = NiceStep(f.x1 - f.x0, 6);
    for (double x = std::ceil(f.x0 / xs) * xs; x <= f.x1 + xs * 1e-9; x += xs) {
      s += Text(f.X(x), kHeight - kBottom + 18, Label(x), "middle");
    }
  }
  s += Line(kLeft, kHeight - kBottom, kWidth - kRight, kHeight - kBottom, "stroke=\"#333\"");
  s += Line(kLeft, kTop, kLeft, kHeight - kBottom, "stroke=\"#333\"");
  s += Text((kLeft + kWidth - kRight) / 2, kHeight - 14, a.x_label, "middle");
  s += Text(16, (kTop + kHeight - kBottom) / 2, a.y_label, "middle",
            " transform=\"rotate(-90 16 " + Num((kTop + kHeight - kBottom) / 2) + ")\"");
  if (a.y_reference >= f.y0 && a.y_reference <= f.y1) {
    s += Line(kLeft, f.Y(a.y_reference), kWidth - kRight, f.Y(a.y_reference),
              "stroke=\"#999\" stroke-dasharray=\"2 3\"");
  }
  return s;
}

std::string Dash(const Series& se) {
  if (se.dotted) return " stroke-dasharray=\"1.5 3\"";
  return se.dashed ? " stroke-dasharray=\"5 3\"" : "";
}

std::string Legend(const std::vector<Series>& series) {
  std::string s;
  double x = kLeft + 8, y = kTop + 8;
  for (const Series& se : series) {
    const double width = 30 + 7.0 * static_cast<double>(se.name.size());
    if (x + width > kWidth - kRight && x > kLeft + 8) {  // wrap onto a new line
      x = kLeft + 8;
      y += 16;
    }
    s += Line(x, y, x + 18, y, "stroke=\"" + se.color + "\" stroke-width=\"2.5\"" + Dash(se));
    s += Text(x + 22, y + 4, se.name, "start");
    x += width;
  }
  return s;
}

void Extent(const std::vector<double>& v, double* lo, double* hi) {
  for (double x : v) {
    if (!std::isfinite(x)) continue;
    *lo = std::min(*lo, x);
    *hi = std::max(*hi, x);
  }
}

}  // namespace

std::string Escape(const std::string& text) {
  std::string out;
  for (char c : text) {
    switch (c) {
      case '<':
        out += "&lt;";
        break;
      case '>':
        out += "&gt;";
        break;
      case '&':
        out += "&amp;";
        break;
      case '"':
        out += "&quot;";
        break;
      default:
        out += c;
    }
  }
  return out;
}

std::string LineChart(const Axes& a, const std::vector<Series>& series) {
  double x0 = 1e300, x1 = -1e300, y0 = a.y_from_zero ? 0 : 1e300, y1 = -1e300;
  for (const Series& s : series) {
    Extent(s.x, &x0, &x1);
    Extent(s.y, &y0, &y1);
    Extent(s.high, &y0, &y1);
    Extent(s.low, &y0, &y1);
  }
  if (y1 < y0) y0 = 0, y1 = 1;
  if (x1 < x0) x0 = 0, x1 = 1;
  if (!a.x_categories.empty()) x0 = -0.5, x1 = static_cast<double>(a.x_categories.size()) - 0.5;
  y1 += (y1 - y0) * 0.2 + 1e-12;  // room for the legend
  const Frame f{x0, x1, y0, y1, a.log_x};
  std::string s = Open(a) + Decorate(a, f);
  for (const Series& se : series) {
    std::string points;
    for (size_t i = 0; i < se.x.size(); ++i) {
      points += Num(f.X(se.x[i])) + "," + Num(f.Y(se.y[i])) + " ";
      if (i < se.low.size() && i < se.high.size()) {
        s += Line(f.X(se.x[i]), f.Y(se.low[i]), f.X(se.x[i]), f.Y(se.high[i]),
                  "stroke=\"" + se.color + "\" stroke-width=\"1.5\"");
      }
      if (se.markers) {
        s += "<circle cx=\"" + Num(f.X(se.x[i])) + "\" cy=\"" + Num(f.Y(se.y[i])) +
             "\" r=\"3.5\" fill=\"" + se.color + "\"/>";
      }
    }
    s += "<polyline fill=\"none\" stroke=\"" + se.color + "\" stroke-width=\"2\" points=\"" +
         points + "\"" + Dash(se) + "/>";
  }
  return s + Legend(series) + "</svg>";
}

std::string BarChart(const Axes& a, const std::vector<double>& values, const std::string& color) {
  double y1 = 0;
  for (double v : values) y1 = std::max(y1, v);
  const double n = static_cast<double>(values.size());
  const Frame f{0, std::max(n, 1.0), 0, y1 > 0 ? y1 * 1.05 : 1, false};
  std::string s = Open(a) + Decorate(a, f);
  const double w = (kWidth - kLeft - kRight) / std::max(n, 1.0);
  for (size_t i = 0; i < values.size(); ++i) {
    const double x = f.X(static_cast<double>(i)), y = f.Y(values[i]);
    s += "<rect x=\"" + Num(x + w * 0.1) + "\" y=\"" + Num(y) + "\" width=\"" +
         Num(std::max(w * 0.8, 0.5)) + "\" height=\"" + Num(kHeight - kBottom - y) + "\" fill=\"" +
         color + "\"/>";
  }
  return s + "</svg>";
}

std::string StepHistogram(const Axes& a, const std::vector<double>& edges,
                          const std::vector<Series>& series) {
  double y0 = 0, y1 = 0;
  for (const Series& se : series) Extent(se.y, &y0, &y1);
  if (edges.size() < 2) return Open(a) + "</svg>";
  const Frame f{edges.front(), edges.back(), 0, y1 > 0 ? y1 * 1.15 : 1, a.log_x};
  std::string s = Open(a) + Decorate(a, f);
  for (const Series& se : series) {
    std::string points = Num(f.X(edges[0])) + "," + Num(f.Y(0)) + " ";
    for (size_t i = 0; i + 1 < edges.size() && i < se.y.size(); ++i) {
      points += Num(f.X(edges[i])) + "," + Num(f.Y(se.y[i])) + " " + Num(f.X(edges[i + 1])) + "," +
                Num(f.Y(se.y[i])) + " ";
    }
    points += Num(f.X(edges.back())) + "," + Num(f.Y(0));
    s += "<polyline fill=\"" + se.color + "\" fill-opacity=\"0.15\" stroke=\"" + se.color +
         "\" stroke-width=\"2\" points=\"" + points + "\"/>";
  }
  return s + Legend(series) + "</svg>";
}

}  // namespace sprig::bench::svg
