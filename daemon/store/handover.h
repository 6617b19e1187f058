// Handing series between instances that share them through Kafka (daemon/feeds/changelog.h):
// one series as a changelog record, and records back into the store.
//
// A record is a JSON object:
//   {"key", "policy", "labels": JSON object text, "part", "ordinal", "episodes",
//    "state": hex of the encoded state, "checkpoint": hex,
//    "actuals": [[period, value], ...], "adjustments": [[period, level], ...],
//    "alerts": [{column: value, ...}],   its unresolved alerts, and resolved ones with events
//                                        not yet delivered
//    "events": [{column: value, ...}]}   its alerts' events with a delivery still pending
// The receiving instance sends those events again (at least once: receivers drop repeats by
// alert id and kind).
//
// Engine thread (the store's connection); inside the caller's transaction where it writes.
#pragma once

#include <cstdint>
#include <nlohmann/json.hpp>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/common/status.h"
#include "daemon/store/sqlite.h"
#include "daemon/store/store.h"

namespace forewarden {

// What the engine holds of a series in memory (the stored row's state may lag it).
struct SeriesHead {
  std::string_view key, policy, labels;
  SeriesPlace place;
  std::string state;         // encoded (state_codec.h)
  std::int64_t through = 0;  // its partition's next offset at the commit
};

class Handover {
 public:
  Status Open(Db& db);

  // The record (JSON text) of stored series `id`.
  Status Export(std::int64_t id, const SeriesHead& head, std::string& out);
  // A partition's position record (JSON text).
  static std::string Position(const SourceOffset& at, std::int32_t next_ordinal,
                              const std::string& writer);

  // Replaces the series of partition `part` held here by `records` (series records as JSON
  // text) and sets the partition's offset of `topic` and next series number from `position`
  // ("": never written). Invalid naming what does not read; store failed otherwise. Inside
  // the caller's transaction.
  Status Adopt(const std::string& topic, std::int32_t part, const std::vector<std::string>& records,
               const std::string& position, const std::vector<std::string>& sinks,
               std::int64_t now_ms);

  // Removes the series of partition `part` held here with their actuals, checkpoints,
  // re-levels, unresolved alerts (and their events and pending deliveries) and the partition's
  // offsets and next series number; resolved alerts stay as history (detached from the series).
  Status DropPartition(std::int32_t part);

  // Inserts one record of partition `part` (replacing a series of the same key), queueing its
  // carried events for every sink in `sinks`. Invalid (naming the field) for a record that does
  // not read; store failed otherwise.
  Status Import(const nlohmann::json& record, std::int32_t part,
                const std::vector<std::string>& sinks, std::int64_t now_ms);

  // The next series number of `part`, and where its source stands (written at import).
  Status SetPartition(std::int32_t part, std::int32_t next_ordinal, const SourceOffset& offset);

 private:
  Status Drop(const char* where, std::int64_t arg);
  Status Failed(const std::string& what) const;
  Db* db_ = nullptr;
  Stmt checkpoint_, actuals_, adjustments_, alerts_, events_, alert_by_id_, series_by_key_;
  Stmt insert_series_, insert_checkpoint_, insert_actual_, insert_adjustment_;
  std::vector<std::string> alert_columns_, event_columns_;
};

// Lower-case hex of bytes, and back (false for text that is not hex).
std::string HexOf(std::string_view bytes);
bool FromHex(std::string_view hex, std::string& out);

}  // namespace forewarden
