// The forecast export (GET /v1/forecasts; `forewarden export` fetches it): every matching
// series' next H forecasts with their intervals, as plain CSV or NDJSON, from one consistent
// moment, streamed so that a million series cost neither the service's memory nor its ingest.
//
// Two steps. On the engine thread, in one job between batches, TakeForecastSeeds copies what
// the forecasts need of each matching series (level, trend, the constants in force, the next
// seasonal terms, MAD: monitors::AheadSeed) together with the read view for keys and policies:
// about 80 bytes a series, the only time the engine spends. Then a thread of the API's export
// pool formats the rows from the seeds (WriteForecasts) into the response's BodyStream, which
// the HTTP server sends as it comes; batches go on being applied meanwhile, and none of them
// shows in the export.
//
// Columns (CSV header, NDJSON field names): key, policy, period (the ISO form of the period the
// forecast is for), h (1 = the next period), forecast, lower, upper (the interval at the
// policy's coverage; empty in CSV and null in NDJSON where the method has none: seasonal-mul,
// croston, sba, or a MAD of 0). Series without a forecast yet (start window) have no rows.
// Rows come in series creation order, h ascending within a series.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <thread>
#include <vector>

#include "daemon/api/attention.h"
#include "daemon/engine/engine.h"
#include "daemon/http/http_server.h"
#include "monitors/ahead.h"

namespace forewarden {

// The longest horizon an export serves (the same as one series' forecast).
inline constexpr int kMaxExportHorizon = 104;

struct ExportQuery {
  std::string policy;  // "" every policy
  std::string label;   // NAME:VALUE, "" every series
  int horizon = 13;
  bool ndjson = false;  // else CSV
};

// One consistent moment of the matching series.
struct ForecastSeeds {
  struct Row {
    std::uint32_t series = 0;       // index into `view`
    std::int32_t last_period = 0;   // the period of the last actual
    std::uint32_t season = 0;       // first of its seasonal terms in season_terms
    monitors::Constants constants;  // in force (adaptive alpha, fitted constants)
    monitors::AheadSeed seed;
    double mad = 0.0;
  };
  std::shared_ptr<const ReadView> view;  // keys, labels and policies of the rows
  std::vector<Row> rows;
  std::vector<double> season_terms;
  int horizon = 13;
  bool ndjson = false;
  std::int64_t as_of_ms = 0;  // the engine's clock when taken
  long matched = 0;           // matching series, with or without a forecast yet
  long rows_total() const { return static_cast<long>(rows.size()) * horizon; }
};

// Engine thread: the seeds of every series of `q` (policy checked by the caller).
ForecastSeeds TakeForecastSeeds(Engine& engine, const ExportQuery& q, LabelFilter& labels);

// Formats every row into `out` in pieces of about 256 KiB; finishes the body when whole. The
// number of rows sent; fewer than seeds.rows_total() when the reader went away.
long WriteForecasts(const ForecastSeeds& seeds, BodyStream& out);

// The threads exports run on: at most `capacity` at once. A slot is reserved before the seeds
// are taken (so a refused export costs the engine nothing) and given back when its thread ends
// or, unused, when the last copy of it goes. The destructor cuts the bodies still being written
// (their connections close without the last chunk) and joins the threads.
class ExportPool {
 public:
  class Slot {
   public:
    explicit Slot(ExportPool* pool) : pool_(pool) {}
    ~Slot();
    Slot(const Slot&) = delete;
    Slot& operator=(const Slot&) = delete;

   private:
    friend class ExportPool;
    ExportPool* pool_;
    bool used_ = false;
  };

  explicit ExportPool(std::size_t capacity) : capacity_(capacity) {}
  ~ExportPool();
  ExportPool(const ExportPool&) = delete;
  ExportPool& operator=(const ExportPool&) = delete;
  // Null when `capacity` exports are running or reserved (the caller answers busy).
  std::shared_ptr<Slot> Reserve();
  // Runs `job` on a thread of its own in the slot; `body` is cut if the pool goes first.
  void Run(const std::shared_ptr<Slot>& slot, std::shared_ptr<BodyStream> body,
           std::function<void()> job);

 private:
  struct Worker {
    std::thread thread;
    std::shared_ptr<BodyStream> body;
    std::shared_ptr<std::atomic<bool>> done;
  };
  void Release();
  void Reap();  // joins the workers that have ended (under mu_)
  const std::size_t capacity_;
  std::mutex mu_;
  std::size_t taken_ = 0;  // slots reserved or running
  std::vector<Worker> workers_;
};

}  // namespace forewarden
