// The rows of a batch of actuals as parsed, before the engine matches them to policies.
#pragma once

#include <cstdint>
#include <string>
#include <utility>
#include <vector>

namespace forewarden {

using Labels = std::vector<std::pair<std::string, std::string>>;

// One actual as received, before it is matched to a policy.
struct IngestRow {
  long line = 0;  // line in the request body or file (1 = header for CSV)
  std::string series;
  std::string period;
  double value = 0.0;
  Labels labels;
  std::int32_t partition = -1;  // the Kafka partition it came from (-1: not from Kafka)
};

// A problem with one row: the line, the field and what is wrong.
struct RowProblem {
  long line = 0;
  std::string field;
  std::string message;
};

// Canonical JSON text of a label set (keys sorted, so equal sets intern to one string).
std::string LabelsJson(const Labels& labels);

}  // namespace forewarden
