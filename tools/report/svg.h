// Small inline-SVG charts for the HTML report: lines with error bars, step histograms and bar
// charts, with axes and legends. Plain strings; no scripts.
#pragma once

#include <string>
#include <vector>

namespace sprig::bench::svg {

struct Series {
  std::string name;
  std::string color;
  std::vector<double> x, y;
  std::vector<double> low, high;  // optional error bars (same length as y)
  bool dashed = false;
  bool dotted = false;
  bool markers = true;
};

struct Axes {
  std::string title, x_label, y_label;
  bool log_x = false;
  // When not empty: x values are indices 0..n-1 drawn evenly and labelled with these.
  std::vector<std::string> x_categories;
  bool y_from_zero = true;
  double y_reference = -1;  // a horizontal rule at this y (e.g. speedup 1), when >= 0
};

// Lines through points, with optional error bars.
std::string LineChart(const Axes& axes, const std::vector<Series>& series);

// Bars of counts over equal bins labelled first..last unit index.
std::string BarChart(const Axes& axes, const std::vector<double>& values, const std::string& color);

// Step histograms over shared bin edges (x: edges, y per series: counts per bin).
std::string StepHistogram(const Axes& axes, const std::vector<double>& edges,
                          const std::vector<Series>& series);

std::string Escape(const std::string& text);

}  // namespace sprig::bench::svg
