#include "status/page_shell.h"

#include "status/html.h"

namespace plumb::status {

std::string PageStart(const std::string& title, const std::string& subtitle, int refresh_seconds) {
  std::string s =
      "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
      "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
      "<link rel=\"icon\" href=\"data:,\">";
  if (refresh_seconds > 0) {
    s += "<meta http-equiv=\"refresh\" content=\"" + std::to_string(refresh_seconds) + "\">";
  }
  s += "<title>";
  AppendEscaped(&s, title);
  s += "</title><style>"
       "body{background:#fff;color:#222;font:14px/1.45 system-ui,-apple-system,'Segoe UI',"
       "sans-serif;margin:0}"
       "header{border-bottom:1px solid #e4e4e4;padding:14px 28px}"
       "header h1{font-size:19px;font-weight:600;margin:0}"
       "header p{margin:2px 0 0;color:#666}"
       "main{padding:8px 28px 28px;max-width:1400px}"
       "section{margin:18px 0 6px}"
       "h2{font-size:15px;font-weight:600;margin:0 0 8px;color:#333}"
       ".cards{display:flex;flex-wrap:wrap;gap:10px}"
       ".card{border:1px solid #e4e4e4;border-radius:6px;padding:8px 12px;min-width:130px}"
       ".card .label{color:#666;font-size:12px}.card .value{font-size:20px;font-weight:600}"
       ".card .unit{color:#666;font-size:12px;margin-left:3px}"
       ".grid2{display:grid;grid-template-columns:repeat(auto-fit,minmax(520px,1fr));gap:14px}"
       "figure.plot{margin:0;border:1px solid #eee;border-radius:6px;padding:10px 12px}"
       "figure.wide{max-width:860px}"
       "figcaption{font-weight:600;margin-bottom:4px}"
       "svg{width:100%;height:auto;display:block;font-family:inherit}"
       "svg .grid{stroke:#eee}svg .axis,svg .tickmark{stroke:#999}"
       "svg .tick{font-size:11px;fill:#555}svg .axis-label{font-size:12px;fill:#444}"
       "svg .empty{font-size:13px;fill:#999}svg .line{stroke-width:1.6}"
       "ul.legend{list-style:none;padding:0;margin:4px 0;display:flex;flex-wrap:wrap;"
       "gap:4px 14px;font-size:12px;color:#444}"
       ".swatch{display:inline-block;width:12px;height:12px;margin-right:5px;"
       "vertical-align:-1px;border-radius:2px}"
       "p.note{font-size:12px;color:#666;margin:4px 0}"
       "details{font-size:12px;margin-top:4px}summary{cursor:pointer;color:#555}"
       "table{border-collapse:collapse;margin:6px 0}"
       "th,td{border-bottom:1px solid #eee;padding:3px 10px 3px 0;text-align:left}"
       "td.num,table.numbers td{font-variant-numeric:tabular-nums}"
       "th{font-weight:600;color:#444}"
       "tr.active td{background:#f4f8f4}"
       "code,pre{font-family:ui-monospace,'DejaVu Sans Mono',monospace;font-size:12px}"
       "pre{background:#f7f7f7;border:1px solid #eee;padding:8px;border-radius:4px;"
       "overflow-x:auto}"
       "footer{color:#777;font-size:12px;padding:12px 28px;border-top:1px solid #e4e4e4}"
       "</style></head><body><header><h1>";
  AppendEscaped(&s, title);
  s += "</h1><p>";
  AppendEscaped(&s, subtitle);
  s += "</p></header><main>";
  return s;
}

void AppendCard(std::string* s, const std::string& key, const std::string& label, double value,
                const std::string& unit, int digits) {
  *s += "<div class=\"card\" data-key=\"" + key + "\" data-value=\"" + ExactNumber(value) +
        "\"><div class=\"label\">" + label + "</div><div class=\"value\">" +
        FormatNumber(value, digits) + "<span class=\"unit\">" + unit + "</span></div></div>";
}

void AppendTextCard(std::string* s, const std::string& key, const std::string& label,
                    const std::string& text) {
  *s += "<div class=\"card\" data-key=\"" + key + "\"><div class=\"label\">" + label +
        "</div><div class=\"value\">";
  AppendEscaped(s, text);
  *s += "</div></div>";
}

std::string StepText(int64_t ms) {
  if (ms % 3600000 == 0) return std::to_string(ms / 3600000) + " h";
  if (ms % 60000 == 0) return std::to_string(ms / 60000) + " min";
  if (ms % 1000 == 0) return std::to_string(ms / 1000) + " s";
  return std::to_string(ms) + " ms";
}

std::string HistoryNote(int64_t step_ms, size_t history_points, size_t plot_points) {
  return "Points every " + StepText(step_ms) + ", the last " + std::to_string(history_points) +
         " kept (" + StepText(step_ms * static_cast<int64_t>(history_points)) + "), at most " +
         std::to_string(plot_points) +
         " drawn (averaged); kept in memory only, so a restart starts the history afresh.";
}

std::string PageEnd(const std::string& json_path) {
  return "</main><footer>The same figures as JSON: <a href=\"" + json_path + "\">" + json_path +
         "</a>. Prometheus metrics: <a href=\"/metrics\">/metrics</a>. The history lives in "
         "this process's memory only: a restart starts it afresh. Read-only page.</footer>"
         "</body></html>\n";
}

}  // namespace plumb::status
