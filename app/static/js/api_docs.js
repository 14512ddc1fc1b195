/* wakeledger /docs: Swagger UI (served by this server from the swagger-ui-bundle package)
 * on this server's OpenAPI schema. A file of its own, so that the page needs no inline script. */
(function () {
  "use strict";
  var root = document.getElementById("swagger-ui");
  window.SwaggerUIBundle({
    url: root.getAttribute("data-openapi-url"),
    dom_id: "#swagger-ui",
    deepLinking: true,
    tryItOutEnabled: false
  });
})();
