#pragma once
// The files of a corpus comparison: an aligned terminal table, compare.md, compare.csv,
// compare.json, and four SVG plots (sector failure rate and bit error rate before ECC,
// against SNR and against channel density, one curve per detector; each plot takes the
// corpus entries of its sweep).

#include <filesystem>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "compare/corpus.hpp"
#include "compare/run_compare.hpp"
#include "compare/svg_plot.hpp"

namespace salvor::compare {

std::string report_table(const Corpus& corpus, const CompareResult& r);     // terminal text
std::string report_markdown(const Corpus& corpus, const CompareResult& r, const nlohmann::json& provenance);
std::string report_csv(const Corpus& corpus, const CompareResult& r);
nlohmann::json report_json(const Corpus& corpus, const CompareResult& r, const nlohmann::json& provenance);

// metric "failure_rate" or "bit_error_rate"; sweep "snr" or "density".
PlotSpec sweep_plot(const Corpus& corpus, const CompareResult& r, const std::string& metric, const std::string& sweep);

// The plot files written by write_report, in order.
std::vector<std::string> plot_file_names();

// Writes every file atomically into `dir` (created). Throws salvor::Error(output).
void write_report(const std::filesystem::path& dir, const Corpus& corpus, const CompareResult& r,
                  const nlohmann::json& provenance);

}  // namespace salvor::compare
