// forewarden_kafka_mock: librdkafka's mock cluster (rdkafka_mock.h: the Kafka protocol on
// loopback, brokers in this process) for the Kafka tests, driven line by line on stdin.
//
//   forewarden_kafka_mock --brokers 3 --topic actuals:12 --topic rejected:1
//   prints "bootstrap 127.0.0.1:PORT,..." once the cluster is up, then answers each command
//   with one line, "ok ..." or "error ...":
//     produce TOPIC FILE   each line of FILE is KEY<TAB>VALUE (in VALUE, \n stands for a line
//                          break and \\ for a backslash); produced in order, keyed (so a key
//                          always lands in one partition); "ok N" once acknowledged
//     produce-to TOPIC FILE   the same, each line PARTITION<TAB>KEY<TAB>VALUE: to that partition
//     consume TOPIC FILE   every message of TOPIC, all partitions, from the beginning to the
//                          end, written as PARTITION<TAB>OFFSET<TAB>KEY<TAB>VALUE (escaped as
//                          for produce); "ok N"
//     down ID | up ID      broker ID (1..brokers) stops / starts answering
//     quit                 (also end of input)
#include <librdkafka/rdkafka.h>
#include <librdkafka/rdkafka_mock.h>

#include <cstdio>
#include <cstring>
#include <fstream>
#include <iostream>
#include <map>
#include <sstream>
#include <string>
#include <vector>

namespace {

rd_kafka_t* Client(rd_kafka_type_t type, const std::string& bootstrap, bool quiet = false) {
  rd_kafka_conf_t* conf = rd_kafka_conf_new();
  char why[512];
  if (!bootstrap.empty())
    rd_kafka_conf_set(conf, "bootstrap.servers", bootstrap.c_str(), why, sizeof why);
  if (quiet) rd_kafka_conf_set(conf, "log_level", "0", why, sizeof why);
  if (type == RD_KAFKA_PRODUCER) {
    rd_kafka_conf_set(conf, "enable.idempotence", "true", why, sizeof why);
    rd_kafka_conf_set(conf, "linger.ms", "5", why, sizeof why);
  } else {
    rd_kafka_conf_set(conf, "group.id", "forewarden-kafka-mock-reader", why, sizeof why);
    rd_kafka_conf_set(conf, "enable.auto.commit", "false", why, sizeof why);
  }
  rd_kafka_t* rk = rd_kafka_new(type, conf, why, sizeof why);
  if (!rk) {
    std::fprintf(stderr, "forewarden_kafka_mock: %s\n", why);
    std::exit(1);
  }
  return rk;
}

long Produce(rd_kafka_t* producer, const std::string& topic, const std::string& file,
             std::string& error, bool to_partition = false) {
  std::ifstream in(file);
  if (!in) {
    error = "cannot read " + file;
    return -1;
  }
  long n = 0;
  std::string line;
  while (std::getline(in, line)) {
    std::int32_t partition = RD_KAFKA_PARTITION_UA;
    if (to_partition) {  // PARTITION<TAB>KEY<TAB>VALUE
      const std::size_t first = line.find('\t');
      partition = std::atoi(line.substr(0, first).c_str());
      line = first == std::string::npos ? "" : line.substr(first + 1);
    }
    const std::size_t tab = line.find('\t');
    const std::string key = tab == std::string::npos ? "" : line.substr(0, tab);
    const std::string escaped = tab == std::string::npos ? line : line.substr(tab + 1);
    std::string value;
    for (std::size_t i = 0; i < escaped.size(); ++i) {
      if (escaped[i] == '\\' && i + 1 < escaped.size()) {
        value += escaped[i + 1] == 'n' ? '\n' : escaped[i + 1];
        ++i;
      } else {
        value += escaped[i];
      }
    }
    for (;;) {
      const rd_kafka_resp_err_t err =
          rd_kafka_producev(producer, RD_KAFKA_V_TOPIC(topic.c_str()),
                            RD_KAFKA_V_PARTITION(partition), RD_KAFKA_V_KEY(key.data(), key.size()),
                            RD_KAFKA_V_VALUE(const_cast<char*>(value.data()), value.size()),
                            RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_END);
      if (err == RD_KAFKA_RESP_ERR_NO_ERROR) break;
      if (err != RD_KAFKA_RESP_ERR__QUEUE_FULL) {
        error = rd_kafka_err2str(err);
        return -1;
      }
      rd_kafka_poll(producer, 50);
    }
    ++n;
  }
  if (rd_kafka_flush(producer, 60000) != RD_KAFKA_RESP_ERR_NO_ERROR) {
    error = "not acknowledged within 60 s";
    return -1;
  }
  return n;
}

long Consume(const std::string& bootstrap, const std::string& topic, int partitions,
             const std::string& file, std::string& error) {
  rd_kafka_t* rk = Client(RD_KAFKA_CONSUMER, bootstrap);
  std::map<int, std::int64_t> end;
  rd_kafka_topic_partition_list_t* parts = rd_kafka_topic_partition_list_new(partitions);
  for (int p = 0; p < partitions; ++p) {
    std::int64_t lo = 0, hi = 0;
    const rd_kafka_resp_err_t err =
        rd_kafka_query_watermark_offsets(rk, topic.c_str(), p, &lo, &hi, 10000);
    if (err != RD_KAFKA_RESP_ERR_NO_ERROR) {
      error = std::string("watermarks: ") + rd_kafka_err2str(err);
      rd_kafka_topic_partition_list_destroy(parts);
      rd_kafka_destroy(rk);
      return -1;
    }
    if (hi > lo) {
      end[p] = hi;
      rd_kafka_topic_partition_list_add(parts, topic.c_str(), p)->offset = lo;
    }
  }
  rd_kafka_assign(rk, parts);
  rd_kafka_topic_partition_list_destroy(parts);
  std::ofstream out(file);
  long n = 0;
  std::map<int, std::int64_t> at;
  auto done = [&] {
    for (const auto& [p, e] : end)
      if (at[p] < e) return false;
    return true;
  };
  for (int idle = 0; !done() && idle < 600;) {
    rd_kafka_message_t* m = rd_kafka_consumer_poll(rk, 100);
    if (!m) {
      ++idle;
      continue;
    }
    if (!m->err) {
      std::string value;
      for (const char c : std::string(static_cast<const char*>(m->payload), m->len))
        value += c == '\n'   ? std::string("\\n")
                 : c == '\\' ? std::string("\\\\")
                             : std::string(1, c);
      out << m->partition << '\t' << m->offset << '\t'
          << std::string(static_cast<const char*>(m->key), m->key_len) << '\t' << value << '\n';
      at[m->partition] = m->offset + 1;
      ++n;
    }
    rd_kafka_message_destroy(m);
  }
  rd_kafka_consumer_close(rk);
  rd_kafka_destroy(rk);
  if (!done()) {
    error = "the end of " + topic + " was not reached within 60 s";
    return -1;
  }
  return n;
}

}  // namespace

int main(int argc, char** argv) {
  int brokers = 3;
  std::map<std::string, int> topics;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    if (a == "--brokers" && i + 1 < argc) {
      brokers = std::atoi(argv[++i]);
    } else if (a == "--topic" && i + 1 < argc) {
      const std::string t = argv[++i];
      const std::size_t colon = t.find(':');
      topics[t.substr(0, colon)] =
          colon == std::string::npos ? 1 : std::atoi(t.c_str() + colon + 1);
    } else {
      std::fprintf(stderr, "usage: forewarden_kafka_mock [--brokers N] [--topic NAME:PARTS]...\n");
      return 2;
    }
  }
  rd_kafka_t* keeper = Client(RD_KAFKA_PRODUCER, "", true);
  rd_kafka_mock_cluster_t* cluster = rd_kafka_mock_cluster_new(keeper, brokers);
  if (!cluster) {
    std::fprintf(stderr, "forewarden_kafka_mock: the mock cluster did not start\n");
    return 1;
  }
  for (const auto& [name, parts] : topics)
    rd_kafka_mock_topic_create(cluster, name.c_str(), parts, std::min(brokers, 3));
  const std::string bootstrap = rd_kafka_mock_cluster_bootstraps(cluster);
  rd_kafka_t* producer = Client(RD_KAFKA_PRODUCER, bootstrap);
  std::cout << "bootstrap " << bootstrap << std::endl;
  std::string line;
  while (std::getline(std::cin, line)) {
    std::istringstream words(line);
    std::string cmd, a, b;
    words >> cmd >> a >> b;
    std::string error;
    if (cmd == "quit") break;
    if (cmd == "produce" || cmd == "produce-to") {
      const long n = Produce(producer, a, b, error, cmd == "produce-to");
      std::cout << (n < 0 ? "error " + error : "ok " + std::to_string(n)) << std::endl;
    } else if (cmd == "consume") {
      const auto t = topics.find(a);
      const long n = t == topics.end() ? -1 : Consume(bootstrap, a, t->second, b, error);
      if (t == topics.end()) error = "no topic " + a;
      std::cout << (n < 0 ? "error " + error : "ok " + std::to_string(n)) << std::endl;
    } else if (cmd == "down" || cmd == "up") {
      const int id = std::atoi(a.c_str());
      const rd_kafka_resp_err_t err = cmd == "down" ? rd_kafka_mock_broker_set_down(cluster, id)
                                                    : rd_kafka_mock_broker_set_up(cluster, id);
      std::cout << (err ? std::string("error ") + rd_kafka_err2str(err) : std::string("ok"))
                << std::endl;
    } else {
      std::cout << "error unknown command '" << cmd << "'" << std::endl;
    }
  }
  rd_kafka_flush(producer, 5000);
  rd_kafka_destroy(producer);
  rd_kafka_mock_cluster_destroy(cluster);
  rd_kafka_destroy(keeper);
  return 0;
}
