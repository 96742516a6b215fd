#include "handlers.hpp"

#include <cstdlib>
#include <optional>
#include <string_view>

#include "residue/detector/scoring/explain.hpp"
#include "residue/detector/scoring/pictures.hpp"
#include "review_page.hpp"
#include "uploads.hpp"

namespace residue {

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
      const auto settings = body ? request_settings(req, res, cfg.scan) : std::nullopt;
      Json record;
      if (!settings || !s.on_a_worker(res, [&](const Model& model) {
            record = scan_bytes(upload_name(req), as_bytes(*body), model, *settings);
          })) {
        return "";
      }
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
      const auto settings = body ? request_settings(req, res, cfg.scan) : std::nullopt;
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
      const Explanation& x = **explained;
      Json answer = x.summary;
      answer["pictures"] = {{"preview", png_data_uri(x.pictures.preview)},
                            {"noise_residual", png_data_uri(x.pictures.noise_residual)},
                            {"residual_spectrum", png_data_uri(x.pictures.residual_spectrum)},
                            {"resampling_pmap_spectrum", png_data_uri(x.pictures.pmap_spectrum)},
                            {"contributions_svg", x.pictures.contributions_svg}};
      reply(res, 200, answer);
      return x.summary["band"];
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
      res.set_content(s.metrics.text(waiting, active, s.current()->id, *s.connections),
                      "text/plain; version=0.0.4");
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
