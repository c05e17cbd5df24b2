// Starts Swagger UI on /docs (a file of its own: the page allows no inline script).
window.addEventListener("load", () => {
  const root = document.getElementById("swagger-ui");
  window.ui = SwaggerUIBundle({
    url: root.dataset.openapiUrl,
    dom_id: "#swagger-ui",
    layout: "BaseLayout",
    deepLinking: true,
    showExtensions: true,
    presets: [SwaggerUIBundle.presets.apis],
  });
});
