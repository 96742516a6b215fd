#include "handlers.hpp"

#include <algorithm>
#include <cstdlib>
#include <optional>
#include <string_view>

#include "residue/detector/scoring/explain.hpp"
#include "residue/detector/scoring/pictures.hpp"
#include "residue/features/fingerprint.hpp"
#include "review_page.hpp"
#include "uploads.hpp"

namespace residue {

namespace {

// With verdicts enabled, a scored record's features are remembered (for a verdict by hash later)
// and taken out of the answer.
void remember(ServiceState& s, Json& record) {
  if (!record.contains("features")) return;
  if (s.memory && record.contains("band")) {
    s.memory->put(record["sha256"].get<std::string>(),
                  {record["features"].dump(), record.value("model", ""), record.value("band", ""),
                   record.value("p_generated", 0.0)});
  }
  record.erase("features");
}

// POST /v1/verdicts: a JSON object {sha256, verdict, generator?, reviewer?, note?}, or a multipart
// form with the image as a file and those fields (sha256 then comes from the image).
void record_verdict(ServiceState& s, const httplib::Request& req, httplib::Response& res) {
  if (!s.verdicts) {
    reply(res, 501,
          error_body("not-enabled", "this service records no verdicts: start it with --verdicts FILE"));
    return;
  }
  nlohmann::json fields = nlohmann::json::object();
  std::optional<std::string> image;
  if (req.is_multipart_form_data()) {
    for (const auto& [name, item] : req.files) {
      if (!item.filename.empty() || name == "image") {
        image = item.content;
      } else {
        fields[name] = item.content;
      }
    }
  } else {
    fields = nlohmann::json::parse(req.body, nullptr, false);
    if (fields.is_discarded() || !fields.is_object()) {
      reply(res, 422,
            error_body("malformed",
                       "the body must be a JSON object: {\"sha256\", \"verdict\": "
                       "\"camera\" or \"generated\", \"generator\", \"reviewer\", \"note\"}"));
      return;
    }
  }
  // What the service knows, not the client: vector, model, band and time come from here.
  for (const char* key : {"features", "id", "recorded", "model", "band", "p_generated"}) fields.erase(key);
  if (image) fields["sha256"] = sha256_hex(as_bytes(*image));
  auto verdict = verdict_from_json(fields);
  if (!verdict) {
    reply(res, 422, error_body("malformed", verdict.error().message));
    return;
  }
  if (image) {
    ScanSettings settings = s.settings.scan;
    settings.with_features = true;
    Json record;
    if (!s.on_a_worker(res, [&](const Model& model) {
          record = scan_bytes(upload_name(req), as_bytes(*image), model, settings);
        })) {
      return;
    }
    if (record.contains("error")) {
      reply(res, status_for(record["error"]["code"]), record);
      return;
    }
    verdict->features = nlohmann::json(record["features"]);
    verdict->model = record.value("model", "");
    verdict->band = record.value("band", "");
    verdict->p_generated = record.value("p_generated", 0.0);
    remember(s, record);
  } else if (auto known = s.memory->find(verdict->sha256)) {
    verdict->features = nlohmann::json::parse(known->features);
    verdict->model = known->model;
    verdict->band = known->band;
    verdict->p_generated = known->p_generated;
  } else {
    auto earlier = s.verdicts->list(verdict->sha256);
    const bool stored = earlier && std::any_of(earlier->begin(), earlier->end(),
                                               [](const Verdict& v) { return v.features.has_value(); });
    if (!stored) {
      reply(res, 404,
            error_body(
                "unknown-image",
                "this service has not scored an image with that SHA-256 recently (it remembers the last " +
                    std::to_string(s.memory->capacity()) +
                    "): send the image itself, as a multipart form with the verdict's fields"));
      return;
    }
  }
  auto added = s.verdicts->add(std::move(*verdict));
  if (!added) {
    reply(res, 500, error_body("internal", added.error().message));
    return;
  }
  Json earlier = Json::array();
  for (const auto& e : added->earlier) earlier.push_back(verdict_to_json(e, false));
  reply(res, 201,
        {{"recorded", verdict_to_json(added->verdict, false)},
         {"conflict", added->conflict},
         {"earlier", earlier},
         {"note", added->conflict
                      ? Json("an earlier verdict on this image disagrees: both are kept, and the image "
                             "is left out of training until one is removed (residue verdict list "
                             "--conflicts)")
                      : Json(nullptr)},
         {"advisory", kAdvisoryNotice}});
}

}  // namespace

void add_handlers(ServiceState& s, const std::function<Result<std::string>()>& reload) {
  const ServiceSettings& cfg = s.settings;
  auto& server = s.server;
  // Route, method, token and declared size are checked on the headers, before any body is read:
  // a stranger cannot make the service read (or wait for) a body it is going to refuse.
  server.set_pre_routing_handler([&s, &cfg](const httplib::Request& req, httplib::Response& res) {
    connection_reading_body();
    const Route* route = find_route(req.path);
    const bool method_ok =
        route != nullptr &&
        (req.method == route->method || (req.method == "HEAD" && std::string(route->method) == "GET"));
    const bool token_ok = route == nullptr || !route->needs_auth || s.authorised(req);
    const bool size_ok =
        !req.has_header("Content-Length") ||
        std::strtoull(req.get_header_value("Content-Length").c_str(), nullptr, 10) <= cfg.max_body_bytes;
    // An upload route with no body at all: the library would refuse to read it with a bare 400.
    const bool upload = route != nullptr && std::string_view(route->method) == "POST" &&
                        std::string_view(route->path) != "/v1/model/reload";
    const bool body_ok = !upload || !req.has_header("Content-Length") ||
                         std::strtoull(req.get_header_value("Content-Length").c_str(), nullptr, 10) > 0;
    if (method_ok && token_ok && size_ok && body_ok) return httplib::Server::HandlerResponse::Unhandled;
    s.observe(route != nullptr ? route->path : "unknown", req, res, [&] {
      if (route == nullptr) {
        reply(res, 404, error_body("not-found", "no such route; see docs/openapi.yaml"));
      } else if (!method_ok) {
        res.set_header("Allow", route->method);
        reply(res, 405, error_body("method-not-allowed", std::string("use ") + route->method));
      } else if (!token_ok) {
        res.set_header("WWW-Authenticate", "Bearer");
        reply(res, 401, error_body("unauthorised", "missing or wrong bearer token"));
      } else if (!size_ok) {
        reply(res, 413,
              error_body("too-large", "the request body is over the size limit of " +
                                          std::to_string(cfg.max_body_bytes) + " bytes"));
      } else {
        reply(res, 400, error_body("empty", "the request body is empty: send the image bytes"));
      }
      return std::string();
    });
    // The body, if any, is left unread: the connection cannot carry another request after it.
    if (req.has_header("Content-Length") || req.has_header("Transfer-Encoding")) {
      res.set_header("Connection", "close");
    }
    return httplib::Server::HandlerResponse::Handled;
  });

  server.Post("/v1/score", [&s, &cfg](const httplib::Request& req, httplib::Response& res,
                                      const httplib::ContentReader& content_reader) {
    s.observe("/v1/score", req, res, [&]() -> std::string {
      const auto body = read_upload(req, res, content_reader, cfg.max_body_bytes);
      auto settings = body ? request_settings(req, res, cfg.scan) : std::nullopt;
      Json record;
      if (settings) settings->with_features = s.memory != nullptr;
      if (!settings || !s.on_a_worker(res, [&](const Model& model) {
            record = scan_bytes(upload_name(req), as_bytes(*body), model, *settings);
          })) {
        return "";
      }
      remember(s, record);
      if (record.contains("error")) {
        reply(res, status_for(record["error"]["code"]), record);
        return "";
      }
      reply(res, 200, record);
      return record["band"];
    });
  });
  server.Post("/v1/explain", [&s, &cfg](const httplib::Request& req, httplib::Response& res,
                                        const httplib::ContentReader& content_reader) {
    s.observe("/v1/explain", req, res, [&]() -> std::string {
      const auto body = read_upload(req, res, content_reader, cfg.max_body_bytes);
      auto settings = body ? request_settings(req, res, cfg.scan) : std::nullopt;
      if (settings) settings->with_features = s.memory != nullptr;
      std::optional<Result<Explanation>> explained;
      if (!settings || !s.on_a_worker(res, [&](const Model& model) {
            explained = explain_bytes(upload_name(req), as_bytes(*body), model, *settings);
          })) {
        return "";
      }
      if (!explained->ok()) {
        const Error& e = explained->error();
        const std::string code(error_code_name(e.code));
        reply(res, status_for(code), error_body(code, e.message));
        return "";
      }
      Explanation& x = **explained;
      remember(s, x.summary);
      Json answer = x.summary;
      answer["verdicts"] = s.memory != nullptr;
      answer["pictures"] = {{"preview", png_data_uri(x.pictures.preview)},
                            {"noise_residual", png_data_uri(x.pictures.noise_residual)},
                            {"residual_spectrum", png_data_uri(x.pictures.residual_spectrum)},
                            {"resampling_pmap_spectrum", png_data_uri(x.pictures.pmap_spectrum)},
                            {"contributions_svg", x.pictures.contributions_svg}};
      if (!x.pictures.surprise_map.samples.empty())
        answer["pictures"]["coding_surprise"] = png_data_uri(x.pictures.surprise_map);
      reply(res, 200, answer);
      return x.summary["band"];
    });
  });
  server.Post("/v1/verdicts", [&s](const httplib::Request& req, httplib::Response& res) {
    s.observe("/v1/verdicts", req, res, [&] {
      record_verdict(s, req, res);
      return std::string();
    });
  });
  server.Get("/", [&s](const httplib::Request& req, httplib::Response& res) {
    s.observe("/", req, res, [&] {
      // Everything the page needs is inline; it may talk only to this service.
      res.set_header("Content-Security-Policy",
                     "default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; "
                     "img-src data: blob:; connect-src 'self'; base-uri 'none'; form-action 'none'; "
                     "frame-ancestors 'none'");
      res.set_header("X-Content-Type-Options", "nosniff");
      res.set_header("Referrer-Policy", "no-referrer");
      res.set_header("Cache-Control", "no-store");
      res.set_content(review_page(), "text/html; charset=utf-8");
      return std::string();
    });
  });
  server.Get("/v1/health", [&s](const httplib::Request& req, httplib::Response& res) {
    s.observe("/v1/health", req, res, [&] {
      const auto model = s.current();
      reply(res, model ? 200 : 503,
            {{"status", model ? "ok" : "no-model"}, {"model", model ? Json(model->id) : Json()}});
      return std::string();
    });
  });
  server.Get("/v1/model", [&s](const httplib::Request& req, httplib::Response& res) {
    s.observe("/v1/model", req, res, [&] {
      const auto model = s.current();
      Json j = model_to_json(*model);
      j.erase("scaler");
      j.erase("linear");
      j["advisory"] = kAdvisoryNotice;
      reply(res, 200, j);
      return std::string();
    });
  });
  server.Post("/v1/model/reload", [&s, reload](const httplib::Request& req, httplib::Response& res) {
    s.observe("/v1/model/reload", req, res, [&] {
      const auto before = s.current()->id;
      auto loaded = reload();
      if (!loaded) {
        reply(res, 422, error_body("model-refused", loaded.error().message + "; still serving " + before));
      } else {
        reply(res, 200, {{"model", *loaded}, {"previous", before}});
      }
      return std::string();
    });
  });
  server.Get("/metrics", [&s](const httplib::Request& req, httplib::Response& res) {
    s.observe("/metrics", req, res, [&] {
      int waiting = 0;
      int active = 0;
      {
        std::lock_guard lock(s.slots_mutex);
        waiting = s.waiting;
        active = s.active;
      }
      std::string text = s.metrics.text(waiting, active, s.current()->id, *s.connections);
      if (s.memory) {
        text +=
            "# HELP residue_remembered_vectors Feature vectors kept for verdicts by hash.\n"
            "# TYPE residue_remembered_vectors gauge\nresidue_remembered_vectors " +
            std::to_string(s.memory->size()) +
            "\n# HELP residue_remembered_bytes Bytes those vectors hold.\n"
            "# TYPE residue_remembered_bytes gauge\nresidue_remembered_bytes " +
            std::to_string(s.memory->bytes()) + "\n";
      }
      res.set_content(text, "text/plain; version=0.0.4");
      return std::string();
    });
  });
  server.set_post_routing_handler([](const httplib::Request&, httplib::Response&) { connection_answered(); });
  server.set_error_handler([](const httplib::Request&, httplib::Response& res) {
    if (!res.body.empty()) return;  // our own answer
    if (res.status == 413) {
      reply(res, 413, error_body("too-large", "the request body is over the size limit"));
    } else if (res.status == 400) {
      reply(res, 400, error_body("bad-request", "the request could not be read"));
    } else if (res.status == 404) {
      reply(res, 404, error_body("not-found", "no such route; see docs/openapi.yaml"));
    } else {
      reply(res, res.status, error_body("http-" + std::to_string(res.status), "request refused"));
    }
  });
}

}  // namespace residue
