// Starts Swagger UI on /docs with the app's own OpenAPI document (no inline script: see app.web.security).
window.addEventListener("load", function () {
  window.ui = SwaggerUIBundle({ url: "/openapi.json", dom_id: "#swagger-ui", deepLinking: true });
});
